"""Where the library lives, how to connect, and its schema revision.

SQLite files run in WAL mode (readers never block the writer) with foreign keys on and a busy
timeout, so several processes can read while one writes. PostgreSQL is used as given.
"""

from __future__ import annotations

import functools
import hashlib
import os
from dataclasses import dataclass
from importlib import resources
from pathlib import Path

import platformdirs
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import create_engine, event, inspect
from sqlalchemy.engine import URL, Engine, make_url
from sqlalchemy.exc import ArgumentError, NoSuchModuleError, OperationalError, SQLAlchemyError
from sqlalchemy.pool import StaticPool

from refdb.errors import LibraryError, SchemaError

#: Environment variable naming the library (same as ``--db``).
ENV_VAR = "REFDB_DATABASE"
#: Milliseconds a SQLite connection waits for a lock before giving up.
BUSY_TIMEOUT_MS = 30_000


def default_library_path() -> Path:
    """``library.sqlite`` in the user's data directory (platformdirs)."""
    return platformdirs.user_data_path("refdb", appauthor=False) / "library.sqlite"


@dataclass(frozen=True)
class Location:
    """A resolved library location."""

    url: URL
    path: Path | None  # the SQLite file, None for in-memory or server databases

    @property
    def display(self) -> str:
        """The location for messages: a file path, or the URL with the password hidden."""
        if self.path is not None:
            return str(self.path)
        return self.url.render_as_string(hide_password=True)

    @property
    def is_sqlite(self) -> bool:
        return self.url.get_backend_name() == "sqlite"


def resolve_location(spec: str | os.PathLike | None = None) -> Location:
    """Turn ``--db`` / ``REFDB_DATABASE`` / the default into a :class:`Location`.

    A value containing ``://`` is a SQLAlchemy URL; anything else is a file path.
    """
    if spec is None:
        spec = os.environ.get(ENV_VAR) or None
    if spec is None:
        path = default_library_path()
        return Location(make_url(f"sqlite:///{path}"), path)
    text = os.fspath(spec)
    if "://" not in text:
        path = Path(text).expanduser().resolve()
        return Location(make_url(f"sqlite:///{path}"), path)
    try:
        url = make_url(text)
    except ArgumentError:
        raise LibraryError(
            "cannot read the library URL", "use sqlite:///path/to/file or postgresql+psycopg://user@host/db"
        ) from None
    backend = url.get_backend_name()
    if backend not in ("sqlite", "postgresql"):
        raise LibraryError(f"unsupported database {backend!r}", "use sqlite or postgresql+psycopg")
    if backend == "postgresql" and url.drivername == "postgresql":
        url = url.set(drivername="postgresql+psycopg")
    path = None
    if backend == "sqlite" and url.query.get("uri") == "true" and (url.database or "").startswith("file:"):
        # SQLite URI filename, e.g. sqlite:///file:lib.sqlite?mode=ro&uri=true (read-only).
        return Location(url, Path(url.database[5:]).expanduser().resolve())
    if backend == "sqlite" and url.database and url.database != ":memory:":
        path = Path(url.database).expanduser().resolve()
        url = url.set(database=str(path))
    return Location(url, path)


def make_engine(location: Location) -> Engine:
    """Create an engine with refdb's connection settings."""
    try:
        if location.is_sqlite:
            kwargs: dict = {"connect_args": {"timeout": BUSY_TIMEOUT_MS / 1000}}
            if location.path is None:
                kwargs.update(poolclass=StaticPool, connect_args={"check_same_thread": False})
            engine = create_engine(location.url, **kwargs)
            event.listen(engine, "connect", _sqlite_pragmas(in_memory=location.path is None))
            event.listen(engine, "begin", _sqlite_begin)
        else:
            engine = create_engine(location.url, pool_pre_ping=True)
    except NoSuchModuleError:
        raise LibraryError(f"no database driver for {location.display}", "pip install 'refdb[postgres]'") from None
    except ModuleNotFoundError as exc:
        raise LibraryError(
            f"the database driver {exc.name!r} is not installed", "pip install 'refdb[postgres]'"
        ) from None
    return engine


def _sqlite_begin(conn) -> None:
    # pysqlite's own transaction handling is off (isolation_level None); SQLAlchemy's begin
    # emits BEGIN here, IMMEDIATE for sessions that will write (see Library._writer).
    if conn.get_execution_options().get("refdb_write"):
        conn.exec_driver_sql("BEGIN IMMEDIATE")
    else:
        conn.exec_driver_sql("BEGIN")


def _sqlite_pragmas(*, in_memory: bool):
    def on_connect(dbapi_conn, _record) -> None:
        dbapi_conn.isolation_level = None
        cur = dbapi_conn.cursor()
        try:
            cur.execute(f"PRAGMA busy_timeout = {BUSY_TIMEOUT_MS}")
            if not in_memory:
                cur.execute("PRAGMA journal_mode = WAL")
                cur.execute("PRAGMA synchronous = NORMAL")
            cur.execute("PRAGMA foreign_keys = ON")
        finally:
            cur.close()

    return on_connect


def _alembic_config() -> Config:
    cfg = Config()
    cfg.set_main_option("script_location", str(resources.files("refdb._migrations")))
    return cfg


@functools.lru_cache(maxsize=1)
def _script_directory() -> ScriptDirectory:
    # Reading the migration scripts is file-system work; every command's schema check needs it.
    return ScriptDirectory.from_config(_alembic_config())


def head_revision() -> str:
    """The schema revision this version of refdb writes."""
    return _script_directory().get_current_head()


def known_revisions() -> set[str]:
    return {s.revision for s in _script_directory().walk_revisions()}


def current_revision(engine: Engine) -> str | None:
    """The library's schema revision, or None for an empty database."""
    with engine.connect() as conn:
        return MigrationContext.configure(conn).get_current_revision()


def has_tables(engine: Engine) -> bool:
    return bool(inspect(engine).get_table_names())


def upgrade_schema(engine: Engine, target: str = "head") -> tuple[str | None, str]:
    """Create or upgrade the schema to ``target``; returns (old revision, new revision).

    SQLite foreign keys are switched off during the migration: table rebuilds must not
    cascade-delete the reflections of the entries being copied.
    """
    from alembic import command

    before = current_revision(engine)
    if before is not None and before not in known_revisions():
        raise SchemaError(
            f"the library has schema revision {before}, made by a newer refdb",
            "upgrade refdb to use it",
        )
    cfg = _alembic_config()
    with engine.connect() as conn:
        sqlite = conn.dialect.name == "sqlite"
        if sqlite:  # outside any transaction, where the pragma takes effect
            conn.connection.driver_connection.execute("PRAGMA foreign_keys = OFF")
        try:
            with conn.execution_options(refdb_write=True).begin():
                cfg.attributes["connection"] = conn
                command.upgrade(cfg, target)
        finally:
            if sqlite:
                conn.connection.driver_connection.execute("PRAGMA foreign_keys = ON")
    return before, current_revision(engine) or ""


def check_schema(engine: Engine, location: Location) -> None:
    """Refuse a library whose schema is not the head revision, with a clear message."""
    rev = current_revision(engine)
    head = head_revision()
    if rev == head:
        return
    if rev is None:
        raise LibraryError(f"no refdb library at {location.display}", "create it with: refdb init")
    if rev not in known_revisions():
        raise SchemaError(
            f"the library at {location.display} has schema revision {rev}, made by a newer refdb",
            "upgrade refdb to use it",
        )
    raise SchemaError(
        f"the library at {location.display} has an older schema (revision {rev}; this refdb uses {head})",
        "back up the file, then upgrade it with: refdb init",
    )


def cache_dir_for(location: Location) -> Path:
    """A directory for derived data (search index) belonging to this library."""
    if location.path is not None:
        return location.path.with_name(location.path.name + ".cache")
    key = hashlib.sha256(location.url.render_as_string(hide_password=True).encode()).hexdigest()[:16]
    return platformdirs.user_cache_path("refdb", appauthor=False) / key


def describe_db_error(exc: SQLAlchemyError, location: Location) -> LibraryError:
    """Translate a driver error into one line a user can act on (never the password)."""
    text = " ".join(str(getattr(exc, "orig", exc)).split())
    low = text.lower()
    if "database is locked" in low or "database table is locked" in low:
        return LibraryError(
            f"the library {location.display} stayed locked by another process for "
            f"{BUSY_TIMEOUT_MS // 1000} s",
            "wait for the other refdb to finish and try again",
        )
    if "readonly" in low or "read-only" in low:
        return LibraryError(
            f"the library {location.display} is read-only", "use a writable location with --db"
        )
    if "unable to open database file" in low:
        return LibraryError(
            f"cannot open the library file {location.display}",
            "check that the folder exists and is writable",
        )
    if "file is not a database" in low or "file is encrypted" in low:
        return LibraryError(f"{location.display} is not a refdb library (not a SQLite database)")
    if isinstance(exc, OperationalError) and location.url.get_backend_name() == "postgresql":
        first = text.split(" (Background")[0]
        pw = location.url.password
        if pw:
            first = first.replace(str(pw), "***")
        return LibraryError(f"cannot use the PostgreSQL library {location.display}: {first[:200]}")
    return LibraryError(f"database error on {location.display}: {text[:200]}")
