"""Crystal structures (CIF) to radiation-free reflections and reference patterns."""
