"""Search index, figures of merit, candidate ranking and mixture decomposition."""
