"""Lossless export and load of a library as JSON lines.

Format (our own, ``refdb-library`` version 1): the first line is a header object
``{"format": "refdb-library", "version": 1, "entries": N}``; every further line is one entry
with its fields in a fixed order and its lines as columns (``d``, ``h``, ``k``, ``l``,
``multiplicity``, ``f2``, ``intensity``; a column is ``null`` when the entry does not have
it). Floats are written with Python's shortest round-trip representation, so export → load →
export gives the same bytes. Library ids are not exported: they belong to one library.
"""

from __future__ import annotations

import json
from collections.abc import Iterator
from datetime import datetime
from typing import IO

import numpy as np

from refdb.errors import InputError
from refdb.library.repository import Library
from refdb.records import PatternLines, ReferenceData, ReferenceEntry

FORMAT = "refdb-library"
VERSION = 1

_FIELDS = (
    "kind", "name", "mineral_name", "formula", "formula_reduced", "elements", "space_group",
    "sg_number", "cell", "volume", "z", "density", "cell_mass", "rir", "wavelength", "source",
    "source_id", "doi", "citation", "licence", "file_name", "notes", "tags",
)


def entry_to_json(entry: ReferenceEntry) -> dict:
    """One entry as a JSON-ready dict (fixed key order)."""
    out: dict = {}
    for f in _FIELDS:
        v = getattr(entry, f)
        if isinstance(v, tuple):
            v = list(v)
        out[f] = v
    out["content_hash"] = entry.content_hash_value
    out["created"] = entry.created.isoformat(timespec="microseconds")
    out["revision"] = entry.revision
    lines = entry.lines
    out["lines"] = {
        "d": [float(x) for x in lines.d],
        "h": None if lines.hkl is None else [int(x) for x in lines.hkl[:, 0]],
        "k": None if lines.hkl is None else [int(x) for x in lines.hkl[:, 1]],
        "l": None if lines.hkl is None else [int(x) for x in lines.hkl[:, 2]],
        "multiplicity": None if lines.multiplicity is None else [int(x) for x in lines.multiplicity],
        "f2": None if lines.f2 is None else [float(x) for x in lines.f2],
        "intensity": None if lines.intensity is None else [float(x) for x in lines.intensity],
    }
    out["structure_text"] = entry.structure_text
    return out


def export_library(library: Library, stream: IO[str]) -> int:
    """Write every entry of ``library`` to ``stream``; returns the number written."""
    n = library.count()
    stream.write(json.dumps({"format": FORMAT, "version": VERSION, "entries": n}) + "\n")
    written = 0
    for entry in library.iter_entries():
        stream.write(json.dumps(entry_to_json(entry), ensure_ascii=False, allow_nan=False) + "\n")
        written += 1
    return written


def read_export(stream: IO[str], *, source: str = "<input>") -> Iterator[tuple[ReferenceData, datetime, int, str]]:
    """Parse an export: yields (data, created, revision, content hash) per entry.

    Raises
    ------
    InputError
        Not an export, a newer format version, a malformed line, or an entry whose content
        does not match its recorded hash (the file was edited or damaged).
    """
    first = stream.readline()
    try:
        header = json.loads(first) if first.strip() else None
    except json.JSONDecodeError:
        header = None
    if not isinstance(header, dict) or header.get("format") != FORMAT:
        raise InputError(f"{source} is not a refdb library export", "make one with: refdb export")
    if header.get("version") != VERSION:
        raise InputError(
            f"{source} is export format version {header.get('version')}; this refdb reads {VERSION}"
        )
    for lineno, line in enumerate(stream, start=2):
        if not line.strip():
            continue
        try:
            obj = json.loads(line)
            data, created, revision, digest = _from_json(obj)
        except (json.JSONDecodeError, KeyError, TypeError, ValueError) as exc:
            raise InputError(f"{source} line {lineno}: malformed entry ({exc.__class__.__name__}: {exc})") from None
        if data.content_hash() != digest:
            raise InputError(
                f"{source} line {lineno}: entry {data.name!r} does not match its content hash",
                "the file was edited or damaged",
            )
        yield data, created, revision, digest


def _from_json(obj: dict) -> tuple[ReferenceData, datetime, int, str]:
    L = obj["lines"]
    n = len(L["d"])
    hkl = None
    if L.get("h") is not None:
        hkl = np.column_stack([L["h"], L["k"], L["l"]]).astype(int).reshape(n, 3)
    lines = PatternLines(
        d=np.array(L["d"], dtype=float),
        hkl=hkl,
        multiplicity=None if L.get("multiplicity") is None else np.array(L["multiplicity"], dtype=int),
        f2=None if L.get("f2") is None else np.array(L["f2"], dtype=float),
        intensity=None if L.get("intensity") is None else np.array(L["intensity"], dtype=float),
    )
    kw = {f: obj[f] for f in _FIELDS}
    kw["elements"] = tuple(kw["elements"])
    kw["tags"] = tuple(kw["tags"])
    kw["cell"] = None if kw["cell"] is None else tuple(float(x) for x in kw["cell"])
    data = ReferenceData(lines=lines, structure_text=obj.get("structure_text"), **kw)
    return data, datetime.fromisoformat(obj["created"]), int(obj["revision"]), str(obj["content_hash"])


def load_export(library: Library, stream: IO[str], *, source: str = "<input>") -> tuple[int, int]:
    """Add every entry of an export (one transaction each); returns (added, already present).

    The whole file is checked before anything is written, so a damaged export adds nothing.
    """
    items = list(read_export(stream, source=source))
    added = present = 0
    for data, created, revision, _digest in items:
        result = library.add(data, created=created, revision=revision)
        if result.created:
            added += 1
        else:
            present += 1
    return added, present
