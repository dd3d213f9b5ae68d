"""The reference library: SQLAlchemy models, migrations, import, queries, export.

Only this package imports SQLAlchemy; it hands out :mod:`refdb.records` dataclasses.
"""

from refdb.library.engine import default_library_path, head_revision, resolve_location
from refdb.library.repository import (
    AddResult,
    EntrySummary,
    Library,
    LibraryStats,
    open_library,
)

__all__ = [
    "AddResult",
    "EntrySummary",
    "Library",
    "LibraryStats",
    "default_library_path",
    "head_revision",
    "open_library",
    "resolve_location",
]
