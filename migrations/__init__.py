"""Alembic migrations of the refdb library schema (shipped inside the package)."""
