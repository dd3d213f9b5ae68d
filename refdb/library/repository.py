"""The library: adding, finding, reading and removing reference entries.

Rows become :mod:`refdb.records` dataclasses at this edge; nothing outside ``refdb.library``
sees a session or a row. Every write is one transaction, so an error (or a killed process)
leaves either the whole entry or no trace of it.
"""

from __future__ import annotations

import hashlib
from collections import Counter
from collections.abc import Iterable, Iterator
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
from sqlalchemy import delete, exists, func, insert, select, update
from sqlalchemy.engine import Engine
from sqlalchemy.exc import IntegrityError, SQLAlchemyError
from sqlalchemy.orm import Session, selectinload

from refdb.errors import InputError, LibraryError, NotFoundError
from refdb.library.engine import (
    Location,
    cache_dir_for,
    check_schema,
    describe_db_error,
    make_engine,
    resolve_location,
    upgrade_schema,
)
from refdb.library.models import Entry, EntryElement, EntryTag, Reflection
from refdb.records import (
    KINDS,
    LibraryArrays,
    PatternLines,
    ReferenceData,
    ReferenceEntry,
    display_source_id,
)


@dataclass(frozen=True)
class AddResult:
    """Outcome of :meth:`Library.add`: the entry's id and whether it was new."""

    entry_id: int
    created: bool


@dataclass(frozen=True)
class EntrySummary:
    """One row of a listing (no reflections)."""

    id: int
    kind: str
    name: str
    mineral_name: str | None
    formula_reduced: str
    space_group: str | None
    sg_number: int | None
    source: str
    source_id: str | None
    n_lines: int
    tags: tuple[str, ...]


@dataclass(frozen=True)
class LibraryStats:
    entries: int
    reflections: int
    by_kind: dict[str, int]
    by_source: dict[str, int]
    by_licence: dict[str, int]
    stamp: str
    schema_revision: str
    location: str


def open_library(
    url: str | Path | None = None, *, create: bool = False, upgrade: bool = False
) -> Library:
    """Open (or with ``create`` make) a reference library.

    Parameters
    ----------
    url : str or Path, optional
        SQLAlchemy URL or a file path; default ``REFDB_DATABASE`` or the user data directory.
    create : bool
        Create the library (and its folder) when it does not exist, and bring an empty database
        to the current schema.
    upgrade : bool
        Upgrade an older schema instead of refusing it.

    Raises
    ------
    LibraryError
        No library there (without ``create``), not a database, locked, read-only, unreachable.
    SchemaError
        The schema is older (without ``upgrade``) or newer than this refdb.
    """
    location = resolve_location(url)
    if location.path is not None:
        if location.path.is_dir():
            raise LibraryError(f"{location.display} is a folder, not a library file")
        if not location.path.exists():
            if not create:
                raise LibraryError(f"no refdb library at {location.display}", "create it with: refdb init")
            try:
                location.path.parent.mkdir(parents=True, exist_ok=True)
            except OSError as exc:
                raise LibraryError(
                    f"cannot create the folder for {location.display}: {exc.strerror}",
                    "choose a writable location with --db",
                ) from None
    engine = make_engine(location)
    lib = Library(engine, location)
    try:
        if create or upgrade:
            lib.schema_change = upgrade_schema(engine)
        check_schema(engine, location)
    except SQLAlchemyError as exc:
        engine.dispose()
        raise describe_db_error(exc, location) from None
    except Exception:
        engine.dispose()
        raise
    return lib


class Library:
    """A reference pattern library on SQLite or PostgreSQL (use :func:`open_library`)."""

    def __init__(self, engine: Engine, location: Location) -> None:
        self.engine = engine
        self.location = location
        #: (revision before, revision after) when opening created or upgraded the schema;
        #: before is None for a new library. None when the schema was only checked.
        self.schema_change: tuple[str | None, str] | None = None

    # -- context management -------------------------------------------------------------
    def __enter__(self) -> Library:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def close(self) -> None:
        self.engine.dispose()

    @property
    def display(self) -> str:
        return self.location.display

    def cache_dir(self) -> Path:
        """A folder for derived data (the search index); created on demand."""
        path = cache_dir_for(self.location)
        path.mkdir(parents=True, exist_ok=True)
        return path

    def _session(self) -> Session:
        return Session(self.engine, expire_on_commit=False)

    def _writer(self) -> Session:
        """A session whose transactions take the write lock at BEGIN (SQLite: IMMEDIATE).

        A deferred SQLite transaction that reads and then writes can fail at once with
        "database is locked" when another writer committed in between; taking the lock first
        makes it wait (busy timeout) instead.
        """
        return Session(self.engine.execution_options(refdb_write=True), expire_on_commit=False)

    def _guard(self, exc: SQLAlchemyError) -> LibraryError:
        return describe_db_error(exc, self.location)

    # -- writing ------------------------------------------------------------------------
    def add(self, data: ReferenceData, *, created: datetime | None = None, revision: int = 1) -> AddResult:
        """Store one reference in its own transaction; an identical one already there wins.

        Returns the id of the stored (or already present) entry.
        """
        _validate(data)
        digest = data.content_hash()
        try:
            with self._writer() as s:
                try:
                    with s.begin():
                        found = s.scalar(select(Entry.id).where(Entry.content_hash == digest))
                        if found is not None:
                            return AddResult(int(found), False)
                        entry = _entry_row(data, digest, created or _now(), revision)
                        s.add(entry)
                        s.flush()
                        s.execute(insert(Reflection), _reflection_rows(entry.id, data.lines))
                    return AddResult(int(entry.id), True)
                except IntegrityError:
                    # Another process stored the same content between our look-up and insert
                    # (PostgreSQL; SQLite's immediate transactions serialise writers).
                    found = s.scalar(select(Entry.id).where(Entry.content_hash == digest))
                    if found is None:
                        raise
                    return AddResult(int(found), False)
        except SQLAlchemyError as exc:
            raise self._guard(exc) from None

    def remove(self, entry_id: int) -> ReferenceEntry:
        """Delete an entry (with its reflections); returns what was removed."""
        entry = self.get(entry_id)
        try:
            with self._writer() as s, s.begin():
                s.execute(delete(Entry).where(Entry.id == entry_id))
        except SQLAlchemyError as exc:
            raise self._guard(exc) from None
        return entry

    def set_tags(self, entry_id: int, add: Iterable[str] = (), remove: Iterable[str] = ()) -> tuple[str, ...]:
        """Add and remove tags of an entry; returns its tags afterwards."""
        add_t = {_clean_tag(t) for t in add}
        rem_t = {_clean_tag(t) for t in remove}
        try:
            with self._writer() as s, s.begin():
                entry = s.get(Entry, entry_id, options=[selectinload(Entry.tags)])
                if entry is None:
                    raise NotFoundError(f"no entry {entry_id} in {self.display}", "see: refdb list")
                have = {t.tag for t in entry.tags}
                new = (have | add_t) - rem_t
                if new != have:
                    entry.tags = [EntryTag(tag=t) for t in sorted(new)]
                    entry.revision = (entry.revision or 1) + 1
                return tuple(sorted(new))
        except SQLAlchemyError as exc:
            raise self._guard(exc) from None

    def set_notes(self, entry_id: int, notes: str) -> None:
        try:
            with self._writer() as s, s.begin():
                n = s.execute(
                    update(Entry)
                    .where(Entry.id == entry_id)
                    .values(notes=notes, revision=Entry.revision + 1)
                ).rowcount
                if not n:
                    raise NotFoundError(f"no entry {entry_id} in {self.display}")
        except SQLAlchemyError as exc:
            raise self._guard(exc) from None

    # -- reading ------------------------------------------------------------------------
    def find_hash(self, content_hash: str) -> int | None:
        """The id of the entry with this content hash, or None."""
        return self.find_hashes([content_hash]).get(content_hash)

    def find_hashes(self, content_hashes: Iterable[str], *, chunk: int = 500) -> dict[str, int]:
        """Ids of the entries with these content hashes (absent ones are left out), looked up
        a chunk at a time so that a bulk import asks once per few hundred files."""
        wanted = sorted(set(content_hashes))
        found: dict[str, int] = {}
        try:
            with self._session() as s:
                for i in range(0, len(wanted), chunk):
                    rows = s.execute(
                        select(Entry.content_hash, Entry.id).where(Entry.content_hash.in_(wanted[i : i + chunk]))
                    )
                    found.update((h, int(eid)) for h, eid in rows)
        except SQLAlchemyError as exc:
            raise self._guard(exc) from None
        return found

    def count(self) -> int:
        try:
            with self._session() as s:
                return int(s.scalar(select(func.count(Entry.id))) or 0)
        except SQLAlchemyError as exc:
            raise self._guard(exc) from None

    def get(self, entry_id: int) -> ReferenceEntry:
        found = self.get_many([entry_id])
        if not found:
            raise NotFoundError(f"no entry {entry_id} in {self.display}", "see: refdb list")
        return found[0]

    def get_many(self, ids: Iterable[int]) -> list[ReferenceEntry]:
        """Entries with these ids, in the order given (missing ids are left out)."""
        wanted = [int(i) for i in ids]
        if not wanted:
            return []
        try:
            with self._session() as s:
                rows = s.scalars(
                    select(Entry)
                    .where(Entry.id.in_(wanted))
                    .options(selectinload(Entry.elements), selectinload(Entry.tags))
                ).all()
                lines = _lines_of(s, [r.id for r in rows])
                by_id = {r.id: _to_record(r, lines.get(r.id)) for r in rows}
        except SQLAlchemyError as exc:
            raise self._guard(exc) from None
        return [by_id[i] for i in wanted if i in by_id]

    def iter_entries(self, batch: int = 200) -> Iterator[ReferenceEntry]:
        """Every entry in id order, a batch at a time (for export)."""
        try:
            with self._session() as s:
                ids = list(s.scalars(select(Entry.id).order_by(Entry.id)))
        except SQLAlchemyError as exc:
            raise self._guard(exc) from None
        for start in range(0, len(ids), batch):
            yield from self.get_many(ids[start : start + batch])

    def list(
        self,
        *,
        elements_required: Iterable[str] = (),
        elements_excluded: Iterable[str] = (),
        elements_allowed: Iterable[str] | None = None,
        text: str | None = None,
        tags: Iterable[str] = (),
        kind: str | None = None,
        limit: int | None = None,
    ) -> list[EntrySummary]:
        """Entries matching all the filters, in id order.

        ``text`` matches name, mineral name, formula or reduced formula (case-insensitive
        substring); element filters use the indexed element table.
        """
        q = select(Entry).options(selectinload(Entry.tags))
        for el in sorted(set(elements_required)):
            q = q.where(
                exists().where(EntryElement.entry_id == Entry.id, EntryElement.element == el)
            )
        excluded = sorted(set(elements_excluded))
        if excluded:
            q = q.where(
                ~exists().where(EntryElement.entry_id == Entry.id, EntryElement.element.in_(excluded))
            )
        if elements_allowed is not None:
            allowed = sorted(set(elements_allowed))
            q = q.where(
                ~exists().where(EntryElement.entry_id == Entry.id, EntryElement.element.not_in(allowed))
            )
        if text:
            pattern = "%" + text.replace("\\", "\\\\").replace("%", "\\%").replace("_", "\\_") + "%"
            q = q.where(
                Entry.name.ilike(pattern, escape="\\")
                | Entry.mineral_name.ilike(pattern, escape="\\")
                | Entry.formula.ilike(pattern, escape="\\")
                | Entry.formula_reduced.ilike(pattern, escape="\\")
            )
        for tag in sorted(set(tags)):
            q = q.where(exists().where(EntryTag.entry_id == Entry.id, EntryTag.tag == _clean_tag(tag)))
        if kind is not None:
            if kind not in KINDS:
                raise InputError(f"unknown kind {kind!r}", f"use one of {', '.join(KINDS)}")
            q = q.where(Entry.kind == kind)
        q = q.order_by(Entry.id)
        if limit is not None:
            q = q.limit(limit)
        try:
            with self._session() as s:
                rows = s.scalars(q).all()
                counts = dict(
                    s.execute(
                        select(Reflection.entry_id, func.count())
                        .where(Reflection.entry_id.in_([r.id for r in rows]))
                        .group_by(Reflection.entry_id)
                    ).all()
                ) if rows else {}
                return [
                    EntrySummary(
                        id=r.id,
                        kind=r.kind,
                        name=r.name,
                        mineral_name=r.mineral_name,
                        formula_reduced=r.formula_reduced,
                        space_group=r.space_group,
                        sg_number=r.sg_number,
                        source=r.source,
                        source_id=r.source_id,
                        n_lines=int(counts.get(r.id, 0)),
                        tags=tuple(sorted(t.tag for t in r.tags)),
                    )
                    for r in rows
                ]
        except SQLAlchemyError as exc:
            raise self._guard(exc) from None

    def stamp(self) -> str:
        """A short hash over every entry's id, content hash and revision.

        It changes whenever an entry is added, changed (tags, notes) or removed; search caches
        and reports carry it so that a result can be tied to the library it came from.
        """
        try:
            with self._session() as s:
                return _stamp_in(s)
        except SQLAlchemyError as exc:
            raise self._guard(exc) from None

    def stats(self) -> LibraryStats:
        from refdb.library.engine import current_revision

        try:
            with self._session() as s:
                n = int(s.scalar(select(func.count(Entry.id))) or 0)
                nref = int(s.scalar(select(func.count()).select_from(Reflection)) or 0)
                by_kind = dict(s.execute(select(Entry.kind, func.count()).group_by(Entry.kind)).all())
                by_source = dict(
                    s.execute(select(Entry.source, func.count()).group_by(Entry.source)).all()
                )
                lic = Counter()
                for (text,) in s.execute(select(Entry.licence)):
                    lic[_licence_label(text)] += 1
                stamp = _stamp_in(s)
        except SQLAlchemyError as exc:
            raise self._guard(exc) from None
        return LibraryStats(
            entries=n,
            reflections=nref,
            by_kind=dict(sorted(by_kind.items())),
            by_source=dict(sorted(by_source.items(), key=lambda kv: (-kv[1], kv[0]))),
            by_licence=dict(sorted(lic.items(), key=lambda kv: (-kv[1], kv[0]))),
            stamp=stamp,
            schema_revision=current_revision(self.engine) or "",
            location=self.display,
        )

    def arrays(self) -> LibraryArrays:
        """The whole library as flat numpy arrays (the input of the search index).

        Everything, the stamp included, is read in one snapshot (one SQLite read transaction
        under WAL; REPEATABLE READ on PostgreSQL), so a concurrent import can never leave the
        arrays labelled with a stamp that does not describe them.
        """
        try:
            with self._session() as s:
                if self.engine.dialect.name == "postgresql":
                    s.connection(execution_options={"isolation_level": "REPEATABLE READ"})
                entries = s.execute(
                    select(
                        Entry.id, Entry.kind, Entry.wavelength, Entry.name, Entry.formula,
                        Entry.formula_reduced, Entry.source_id, Entry.file_name, Entry.space_group,
                        Entry.sg_number, Entry.rir, Entry.cell_mass, Entry.volume, Entry.z,
                        Entry.density, Entry.a, Entry.b, Entry.c, Entry.alpha, Entry.beta,
                        Entry.gamma,
                    ).order_by(Entry.id)
                ).all()
                elements: dict[int, list[str]] = {}
                for eid, el in s.execute(
                    select(EntryElement.entry_id, EntryElement.element).order_by(
                        EntryElement.entry_id, EntryElement.element
                    )
                ):
                    elements.setdefault(eid, []).append(el)
                tags: dict[int, list[str]] = {}
                for eid, tag in s.execute(
                    select(EntryTag.entry_id, EntryTag.tag).order_by(EntryTag.entry_id, EntryTag.tag)
                ):
                    tags.setdefault(eid, []).append(tag)
                cols = _reflection_columns(s, (Reflection.d, Reflection.multiplicity, Reflection.f2,
                                               Reflection.intensity))
                stamp = _stamp_in(s)
        except SQLAlchemyError as exc:
            raise self._guard(exc) from None
        ids = np.array([e.id for e in entries], dtype=np.int64)
        r_entry = np.searchsorted(ids, cols[0]).astype(np.int32)  # rows are ordered by entry id
        r_d = cols[1]
        r_m = np.nan_to_num(cols[2], nan=0.0).astype(np.int32)
        r_f2, r_i = cols[3], cols[4]
        start = np.searchsorted(r_entry, np.arange(len(ids) + 1)).astype(np.int64)
        meta = tuple(
            {
                "name": e.name,
                "formula": e.formula,
                "formula_reduced": e.formula_reduced,
                "source_id": display_source_id(e.source_id, e.file_name, e.id),
                "space_group": e.space_group,
                "sg_number": e.sg_number,
                "elements": tuple(elements.get(e.id, ())),
                "tags": tuple(tags.get(e.id, ())),
                "rir": e.rir,
                "cell_mass": e.cell_mass,
                "volume": e.volume,
                "z": e.z,
                "density": e.density,
                "cell": None if e.a is None else (e.a, e.b, e.c, e.alpha, e.beta, e.gamma),
            }
            for e in entries
        )
        return LibraryArrays(
            entry_id=ids,
            kind=np.array([0 if e.kind == "computed" else 1 for e in entries], dtype=np.int8),
            wavelength=np.array([np.nan if e.wavelength is None else e.wavelength for e in entries]),
            line_start=start,
            line_entry=r_entry,
            d=r_d,
            multiplicity=r_m,
            f2=r_f2,
            intensity=r_i,
            meta=meta,
            stamp=stamp,
        )


# -- conversions ---------------------------------------------------------------------------
def _stamp_in(s: Session) -> str:
    """The library stamp (see :meth:`Library.stamp`) as seen by session ``s``."""
    h = hashlib.sha256()
    for eid, digest, rev in s.execute(select(Entry.id, Entry.content_hash, Entry.revision).order_by(Entry.id)):
        h.update(f"{eid}:{digest}:{rev}\n".encode())
    return h.hexdigest()[:16]


def _now() -> datetime:
    return datetime.now(UTC).replace(tzinfo=None)


def _clean_tag(tag: str) -> str:
    t = tag.strip()
    if not t or len(t) > 64 or any(c.isspace() for c in t):
        raise InputError(f"bad tag {tag!r}", "tags are 1–64 characters without spaces")
    return t


def _licence_label(text: str | None) -> str:
    if not text:
        return "(none stated)"
    first = " ".join(text.split())
    return first if len(first) <= 70 else first[:67] + "..."


def _validate(data: ReferenceData) -> None:
    if data.kind not in KINDS:
        raise InputError(f"unknown kind {data.kind!r}")
    if not data.name.strip():
        raise InputError("a reference needs a name")
    lines = data.lines
    n = len(lines)
    if n == 0:
        raise InputError(f"{data.name}: the pattern has no lines")
    d = np.asarray(lines.d, dtype=float)
    if not np.all(np.isfinite(d)) or np.any(d <= 0):
        raise InputError(f"{data.name}: d-spacings must be positive numbers")
    for label, arr in (("hkl", lines.hkl), ("multiplicity", lines.multiplicity), ("f2", lines.f2), ("intensity", lines.intensity)):
        if arr is not None and len(arr) != n:
            raise InputError(f"{data.name}: {label} has {len(arr)} values for {n} lines")
    if data.kind == "computed" and lines.f2 is None:
        raise InputError(f"{data.name}: a computed reference needs |F|² values")
    if data.kind == "measured":
        if lines.intensity is None:
            raise InputError(f"{data.name}: a measured reference needs intensities")
        if data.wavelength is None or not (0.1 <= data.wavelength <= 5.0):
            raise InputError(f"{data.name}: a measured reference needs the wavelength (0.1–5 Å) it was measured with")
    for label, arr in (("f2", lines.f2), ("intensity", lines.intensity)):
        if arr is not None and (not np.all(np.isfinite(arr)) or np.any(np.asarray(arr) < 0)):
            raise InputError(f"{data.name}: {label} values must be finite and non-negative")


def _entry_row(data: ReferenceData, digest: str, created: datetime, revision: int) -> Entry:
    cell = data.cell or (None,) * 6
    return Entry(
        kind=data.kind,
        name=data.name.strip(),
        mineral_name=data.mineral_name,
        formula=data.formula,
        formula_reduced=data.formula_reduced,
        space_group=data.space_group,
        sg_number=data.sg_number,
        a=_f(cell[0]), b=_f(cell[1]), c=_f(cell[2]),
        alpha=_f(cell[3]), beta=_f(cell[4]), gamma=_f(cell[5]),
        volume=_f(data.volume),
        z=_f(data.z),
        density=_f(data.density),
        wavelength=_f(data.wavelength),
        cell_mass=_f(data.cell_mass),
        rir=_f(data.rir),
        source=data.source or "in-house",
        source_id=data.source_id,
        doi=data.doi,
        citation=data.citation,
        licence=data.licence,
        file_name=data.file_name,
        structure_text=data.structure_text,
        content_hash=digest,
        created=created,
        notes=data.notes or "",
        revision=revision,
        elements=[EntryElement(element=e) for e in sorted(set(data.elements))],
        tags=[EntryTag(tag=_clean_tag(t)) for t in sorted(set(data.tags))],
    )


def _f(x: float | None) -> float | None:
    return None if x is None else float(x)


def _reflection_rows(entry_id: int, lines: PatternLines) -> list[dict]:
    n = len(lines)
    hkl = lines.hkl
    rows = []
    for i in range(n):
        rows.append(
            {
                "entry_id": entry_id,
                "seq": i,
                "d": float(lines.d[i]),
                "h": None if hkl is None else int(hkl[i][0]),
                "k": None if hkl is None else int(hkl[i][1]),
                "l": None if hkl is None else int(hkl[i][2]),
                "multiplicity": None if lines.multiplicity is None else int(lines.multiplicity[i]),
                "f2": None if lines.f2 is None else float(lines.f2[i]),
                "intensity": None if lines.intensity is None else float(lines.intensity[i]),
            }
        )
    return rows


def _reflection_columns(s: Session, fields: tuple, ids: list[int] | None = None) -> list[np.ndarray]:
    """Entry id and ``fields`` of the reflections (of ``ids``, else of every entry), in entry and
    line order, as float arrays read from plain rows (no ORM object per reflection); NULL
    becomes NaN."""
    q = select(Reflection.entry_id, *fields)
    if ids is not None:
        q = q.where(Reflection.entry_id.in_(ids))
    rows = s.execute(q.order_by(Reflection.entry_id, Reflection.seq)).all()
    if not rows:
        return [np.zeros(0) for _ in range(len(fields) + 1)]
    return [np.array(c, dtype=float) for c in zip(*rows, strict=True)]


def _lines_of(s: Session, ids: list[int]) -> dict[int, PatternLines]:
    """The reflections of these entries as arrays (a measured entry has no hkl: NaN there)."""
    if not ids:
        return {}
    cols = _reflection_columns(s, (Reflection.d, Reflection.h, Reflection.k, Reflection.l,
                                   Reflection.multiplicity, Reflection.f2, Reflection.intensity), ids)
    owner = cols[0].astype(np.int64)
    if owner.size == 0:
        return {}
    firsts = np.flatnonzero(np.r_[True, owner[1:] != owner[:-1]])
    out = {}
    for a, b in zip(firsts, np.r_[firsts[1:], owner.size], strict=True):
        part = [c[a:b].copy() for c in cols]
        complete = [not np.isnan(c).any() for c in part]
        out[int(owner[a])] = PatternLines(
            d=part[1], hkl=np.column_stack(part[2:5]).astype(int) if all(complete[2:5]) else None,
            multiplicity=part[5].astype(int) if complete[5] else None,
            f2=part[6] if complete[6] else None, intensity=part[7] if complete[7] else None,
        )
    return out


def _to_record(r: Entry, lines: PatternLines | None) -> ReferenceEntry:
    if lines is None:  # an entry without reflections
        lines = PatternLines(d=np.zeros(0), hkl=None, multiplicity=None, f2=None, intensity=None)
    cell = None if r.a is None else (r.a, r.b, r.c, r.alpha, r.beta, r.gamma)
    return ReferenceEntry(
        id=r.id,
        kind=r.kind,  # type: ignore[arg-type]
        name=r.name,
        formula=r.formula,
        formula_reduced=r.formula_reduced,
        elements=tuple(sorted(e.element for e in r.elements)),
        lines=lines,
        mineral_name=r.mineral_name,
        space_group=r.space_group,
        sg_number=r.sg_number,
        cell=cell,
        volume=r.volume,
        z=r.z,
        density=r.density,
        cell_mass=r.cell_mass,
        rir=r.rir,
        wavelength=r.wavelength,
        source=r.source,
        source_id=r.source_id,
        doi=r.doi,
        citation=r.citation,
        licence=r.licence,
        file_name=r.file_name,
        structure_text=r.structure_text,
        notes=r.notes or "",
        tags=tuple(sorted(t.tag for t in r.tags)),
        content_hash_value=r.content_hash,
        created=r.created,
        revision=r.revision or 1,
    )
