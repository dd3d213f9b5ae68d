"""Schema migrations: an old library is refused until upgraded, and upgrading loses nothing."""

from __future__ import annotations

import datetime as dt

import pytest
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext
from sqlalchemy import MetaData, func, insert, select

from refdb.errors import SchemaError
from refdb.library import head_revision, open_library
from refdb.library.engine import make_engine, resolve_location, upgrade_schema
from refdb.library.models import Base


def _library_at_first_revision(url: str, n_entries: int = 3) -> None:
    """A library made at revision 0001 holding entries, written with that revision's tables."""
    engine = make_engine(resolve_location(url))
    upgrade_schema(engine, "0001")
    md = MetaData()
    md.reflect(engine)
    entries, elements, refl = md.tables["entries"], md.tables["entry_elements"], md.tables["reflections"]
    assert "rir" not in entries.c  # really the old schema
    with engine.begin() as conn:
        for i in range(1, n_entries + 1):
            conn.execute(
                insert(entries).values(
                    id=i, kind="computed", name=f"old {i}", formula="Si", formula_reduced="Si",
                    source="COD", content_hash=f"{i:064x}", created=dt.datetime(2026, 1, i),
                    notes="", structure_text=f"data_{i}", a=5.431144,
                )
            )
            conn.execute(insert(elements).values(entry_id=i, element="Si"))
            conn.execute(
                insert(refl),
                [{"entry_id": i, "seq": k, "d": 3.1356 / (k + 1), "h": 1, "k": 1, "l": 1, "multiplicity": 8, "f2": 100.0 * i}
                 for k in range(50)],
            )
    engine.dispose()


def test_old_schema_refused_then_upgraded_without_loss(library_url):
    _library_at_first_revision(library_url)
    with pytest.raises(SchemaError, match="older schema.*refdb init"):
        open_library(library_url)
    with open_library(library_url, upgrade=True) as lib:
        assert lib.count() == 3
        e = lib.get(2)
        assert e.name == "old 2" and e.elements == ("Si",)
        assert e.cell is not None and e.cell[0] == 5.431144
        assert len(e.lines) == 50 and e.lines.f2[0] == 200.0
        assert e.revision == 1 and e.rir is None  # new columns take their defaults
        assert e.created == dt.datetime(2026, 1, 2)
        assert lib.arrays().d.shape == (150,)
    # The upgraded library is at head and opens normally.
    with open_library(library_url) as lib:
        assert lib.stats().schema_revision == head_revision()


def test_newer_schema_refused(sqlite_url):
    with open_library(sqlite_url, create=True):
        pass
    engine = make_engine(resolve_location(sqlite_url))
    with engine.begin() as conn:
        conn.exec_driver_sql("UPDATE alembic_version SET version_num = '9999'")
    engine.dispose()
    with pytest.raises(SchemaError, match="newer refdb"):
        open_library(sqlite_url)
    with pytest.raises(SchemaError, match="newer refdb"):
        open_library(sqlite_url, create=True, upgrade=True)


def test_models_match_head_migration(library_url):
    with open_library(library_url, create=True) as lib:
        with lib.engine.connect() as conn:
            diffs = compare_metadata(MigrationContext.configure(conn), Base.metadata)
    assert diffs == []


def test_upgrade_keeps_reflection_rows_on_sqlite(sqlite_url):
    """Table rebuilds on SQLite must not cascade-delete child rows (foreign keys are on)."""
    _library_at_first_revision(sqlite_url, n_entries=5)
    with open_library(sqlite_url, upgrade=True) as lib:
        with lib.engine.connect() as conn:
            from refdb.library.models import Reflection

            assert conn.scalar(select(func.count()).select_from(Reflection.__table__)) == 250
