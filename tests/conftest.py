"""Fixtures shared by every test package.

* ``shared_structures``: the openly licensed COD structures in ``../shared/data/structures``
  beside the repository (tests that need them skip with a reason when it is absent).
* ``library_url``: a fresh library for each of the backends available here: a temporary SQLite
  file always, PostgreSQL when ``REFDB_TEST_POSTGRES_URL`` names a server (CI starts one).
"""

from __future__ import annotations

import os
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
SHARED = REPO.parent / "shared"
STRUCTURES = SHARED / "data" / "structures"
POSTGRES_URL = os.environ.get("REFDB_TEST_POSTGRES_URL")


@pytest.fixture(scope="session")
def shared_structures() -> Path:
    if not (STRUCTURES / "MANIFEST.tsv").is_file():
        pytest.skip("the shared structure set (../shared/data/structures) is not beside this checkout")
    return STRUCTURES


def _reset_postgres(url: str) -> None:
    from sqlalchemy import create_engine, text

    engine = create_engine(url)
    with engine.begin() as conn:
        conn.execute(text("DROP SCHEMA IF EXISTS public CASCADE"))
        conn.execute(text("CREATE SCHEMA public"))
    engine.dispose()


BACKENDS = ["sqlite"] + (["postgresql"] if POSTGRES_URL else [])


@pytest.fixture(params=["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)])
def library_url(request, tmp_path) -> str:
    """A URL for a library that does not exist yet (create it with ``create=True``)."""
    if request.param == "sqlite":
        return f"sqlite:///{tmp_path / 'library.sqlite'}"
    if not POSTGRES_URL:
        pytest.skip("no PostgreSQL server: set REFDB_TEST_POSTGRES_URL (CI does)")
    _reset_postgres(POSTGRES_URL)
    return POSTGRES_URL


@pytest.fixture
def sqlite_url(tmp_path) -> str:
    return f"sqlite:///{tmp_path / 'library.sqlite'}"


@pytest.fixture(autouse=True)
def _isolated_home(tmp_path_factory, monkeypatch):
    """Keep tests away from the user's real library and caches."""
    home = tmp_path_factory.mktemp("home")
    monkeypatch.setenv("XDG_DATA_HOME", str(home / "data"))
    monkeypatch.setenv("XDG_CACHE_HOME", str(home / "cache"))
    monkeypatch.delenv("REFDB_DATABASE", raising=False)
