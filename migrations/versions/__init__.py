"""Schema revisions, oldest first."""
