"""Plain records that cross the library's edge: what is stored, and what comes back.

These are the only shapes in which reference data leave ``refdb.library``; nothing outside that
package sees an ORM row or a session.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from datetime import datetime
from typing import Literal

import numpy as np

Kind = Literal["computed", "measured"]
KINDS: tuple[str, ...] = ("computed", "measured")


@dataclass(frozen=True, eq=False)
class PatternLines:
    """The lines of one reference pattern, radiation-free where possible.

    Attributes
    ----------
    d : ndarray, shape (n,)
        d-spacings in Å, in descending order.
    hkl : ndarray, shape (n, 3), int, or None
        Miller indices (one representative of each symmetry-equivalent set); None when unknown.
    multiplicity : ndarray, shape (n,), int, or None
        Number of reflections merged into each line (computed entries).
    f2 : ndarray, shape (n,), or None
        |F|² in electrons² per unit cell, without anomalous terms (computed entries).
    intensity : ndarray, shape (n,), or None
        Observed relative intensity, 0–100 (measured entries), for the entry's wavelength.
    """

    d: np.ndarray
    hkl: np.ndarray | None = None
    multiplicity: np.ndarray | None = None
    f2: np.ndarray | None = None
    intensity: np.ndarray | None = None

    def __len__(self) -> int:
        return int(self.d.shape[0])


@dataclass(frozen=True, eq=False, kw_only=True)
class ReferenceData:
    """Everything stored for one reference phase, before it has a library id.

    Computed entries carry ``structure_text`` (the CIF) and |F|²; measured entries carry observed
    intensities and the ``wavelength`` (Å) they were measured with.
    """

    kind: Kind
    name: str
    formula: str
    formula_reduced: str
    elements: tuple[str, ...]
    lines: PatternLines
    mineral_name: str | None = None
    space_group: str | None = None
    sg_number: int | None = None
    cell: tuple[float, float, float, float, float, float] | None = None
    volume: float | None = None  # Å³
    z: float | None = None  # formula units per cell
    density: float | None = None  # g/cm³
    cell_mass: float | None = None  # g/mol per unit cell (Σ occupancy × atomic mass)
    rir: float | None = None  # I/Ic against corundum, 50:50 by weight
    wavelength: float | None = None  # Å, measured entries
    source: str = "in-house"  # database name or "in-house"
    source_id: str | None = None  # database code, e.g. COD number; else the file's stem
    doi: str | None = None
    citation: str | None = None
    licence: str | None = None
    file_name: str | None = None
    structure_text: str | None = None
    notes: str = ""
    tags: tuple[str, ...] = ()

    def content_hash(self) -> str:
        """SHA-256 of what makes this reference what it is (not its tags or notes).

        A computed entry is its structure text with line endings and trailing blanks
        normalised, so the same CIF imported twice is one entry; a measured entry is its name,
        formula, wavelength and lines written with fixed precision.
        """
        if self.kind == "computed" and self.structure_text:
            return structure_hash(self.structure_text)
        h = hashlib.sha256()
        h.update(self.kind.encode())
        h.update(f"\0{self.name}\0{self.formula}\0{self.wavelength!r}".encode())
        inten = self.lines.intensity if self.lines.intensity is not None else self.lines.f2
        if inten is None:
            inten = np.zeros(len(self.lines))
        for d, i in zip(self.lines.d, inten, strict=True):
            h.update(f"\0{d:.6f}:{i:.4f}".encode())
        if self.lines.hkl is not None:
            h.update(b"\0hkl" + np.ascontiguousarray(self.lines.hkl, dtype=np.int64).tobytes())
        return h.hexdigest()


def structure_hash(structure_text: str) -> str:
    """Content hash of a computed reference: its CIF text with line ends and trailing blanks
    normalised (so the same file imported twice, or with CRLF line ends, is one entry)."""
    text = "\n".join(line.rstrip() for line in structure_text.splitlines()).strip()
    return hashlib.sha256(b"computed\0" + text.encode("utf-8")).hexdigest()


@dataclass(frozen=True, eq=False, kw_only=True)
class ReferenceEntry(ReferenceData):
    """A reference as stored in a library."""

    id: int
    content_hash_value: str
    created: datetime
    revision: int = 1

    @property
    def display_source_id(self) -> str:
        """The database code, else the imported file's stem, else ``#id``."""
        return display_source_id(self.source_id, self.file_name, self.id)


def display_source_id(source_id: str | None, file_name: str | None, entry_id: int) -> str:
    """The ``source_id`` that reports and ``--json`` show for an entry: the database code,
    else the imported file's stem, else ``#id``."""
    if source_id:
        return source_id
    if file_name:
        stem = file_name.replace("\\", "/").rsplit("/", 1)[-1]
        return stem.rsplit(".", 1)[0] if "." in stem else stem
    return f"#{entry_id}"


@dataclass(frozen=True, eq=False)
class LibraryArrays:
    """The whole library as flat arrays: the input of the search index.

    Per reflection (length R): ``line_entry`` (row number into the per-entry arrays, int32),
    ``d`` (Å), ``multiplicity`` (0 when unknown), ``f2`` (NaN for measured entries),
    ``intensity`` (NaN for computed entries).
    Per entry (length E): ``entry_id``, ``kind`` (0 computed, 1 measured), ``wavelength``
    (NaN for computed), ``line_start`` (E+1 offsets into the reflection arrays, entries' lines
    are contiguous), and ``meta``: a tuple of per-entry dicts with name, formula,
    formula_reduced, source_id, space_group, elements (tuple), tags (tuple), rir, cell_mass,
    volume, z, density.
    """

    entry_id: np.ndarray
    kind: np.ndarray
    wavelength: np.ndarray
    line_start: np.ndarray
    line_entry: np.ndarray
    d: np.ndarray
    multiplicity: np.ndarray
    f2: np.ndarray
    intensity: np.ndarray
    meta: tuple[dict, ...] = field(default=())
    stamp: str = ""

    @property
    def n_entries(self) -> int:
        return int(self.entry_id.shape[0])
