"""The search index: every reflection of the library as flat numpy arrays, cached on disk.

The index is derived data. :func:`build_index` turns a :class:`~refdb.records.LibraryArrays`
into a :class:`SearchIndex`; :func:`load_index` keeps a copy in the library's ``cache_dir()``
stamped with the library's content stamp and rebuilds it when the stamp differs. Files are
plain ``.npy`` arrays (memory-mapped on load, never pickled) and one ``manifest.json``.

What is stored
--------------
Per reflection (length R, entries' lines contiguous, ``line_start`` gives the offsets):

* ``d`` (float32, Å) and ``line_entry`` (int32 row of the entry);
* ``strength`` (float32): ``m·|F|²`` for computed entries (multiplicity taken as 1 where it is
  unknown), the observed relative intensity for measured entries.

Per entry (length E): ``entry_id`` (int64), ``kind`` (int8, 0 computed, 1 measured),
``wavelength`` (float32 Å, NaN for computed), ``elements`` (E, 2) uint64 bitmask (bit Z−1 of
the 128-bit word pair, Z = 1…118), ``sg_number`` (int16, 0 unknown), ``volume`` (float32 Å³),
``cell`` (E, 6) float32, and text columns (name, formula, formula_reduced, source_id,
space_group) as UTF-8 blobs with offsets, decoded only for the entries shown. Tags are a
vocabulary plus (entry row, tag code) pairs.

Strong-line table
-----------------
For the coarse prefilter of :mod:`refdb.match.search` every entry keeps its
:data:`STRONG_LINES` strongest lines for a given wavelength (intensity ``strength·LP(2θ)`` for
computed entries; for measured ones the observed intensity with the reference's own
Lorentz–polarisation factor replaced by that of the query wavelength), restricted to
2θ ≤ :data:`STRONG_MAX_TWO_THETA`. The table holds, per entry, the lines' ln d and their
intensities relative to the entry's strongest line, and a copy of the ln d of those with at
least :data:`SORTED_MIN_WEIGHT` of it, sorted over the whole library for ``np.searchsorted``. Tables are built lazily per wavelength (rounded to
1e-4 Å), kept in memory and written beside the index when it has a directory.
"""

from __future__ import annotations

import json
import os
import shutil
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Protocol

import numpy as np

from refdb.errors import LibraryError
from refdb.geometry import lorentz_polarisation
from refdb.records import LibraryArrays

#: Bump when the file layout or the meaning of an array changes; older caches are rebuilt.
INDEX_FORMAT = 1
#: Number of strongest lines per entry kept for the prefilter.
STRONG_LINES = 10
#: Strong lines are chosen among lines below this angle (degrees 2θ, primary wavelength);
#: few scans reach further and high-angle lines are weak in Bragg–Brentano geometry.
STRONG_MAX_TWO_THETA = 120.0
#: Only strong lines at least this strong (relative to the entry's strongest) are in the
#: sorted table the prefilter's first pass reads; weaker ones cannot earn much there.
SORTED_MIN_WEIGHT = 0.12
#: Version of the strong-table files (part of their names; older ones are rebuilt).
_STRONG_LAYOUT = 5
#: Entries processed at once while building strong tables (bounds the temporary memory).
_CHUNK_LINES = 4_000_000

_TEXT_COLUMNS = ("name", "formula", "formula_reduced", "source_id", "space_group")
_INDEX_DIR = f"search-index-v{INDEX_FORMAT}"


class _LibraryLike(Protocol):
    def stamp(self) -> str: ...
    def arrays(self) -> LibraryArrays: ...
    def cache_dir(self) -> Path: ...


# -- elements --------------------------------------------------------------------------------

_SYMBOLS = (
    "H He Li Be B C N O F Ne Na Mg Al Si P S Cl Ar K Ca Sc Ti V Cr Mn Fe Co Ni Cu Zn Ga Ge As "
    "Se Br Kr Rb Sr Y Zr Nb Mo Tc Ru Rh Pd Ag Cd In Sn Sb Te I Xe Cs Ba La Ce Pr Nd Pm Sm Eu Gd "
    "Tb Dy Ho Er Tm Yb Lu Hf Ta W Re Os Ir Pt Au Hg Tl Pb Bi Po At Rn Fr Ra Ac Th Pa U Np Pu Am "
    "Cm Bk Cf Es Fm Md No Lr Rf Db Sg Bh Hs Mt Ds Rg Cn Nh Fl Mc Lv Ts Og"
).split()
#: Atomic number of each element symbol (D and T count as H).
ATOMIC_NUMBER: dict[str, int] = {s: z for z, s in enumerate(_SYMBOLS, start=1)} | {"D": 1, "T": 1}


def element_mask(symbols: Sequence[str]) -> np.ndarray:
    """The 128-bit element mask of a set of element symbols.

    Parameters
    ----------
    symbols : sequence of str
        Element symbols, case-insensitive first letter handling is *not* applied: ``"Co"`` is
        cobalt and ``"CO"`` is an error.

    Returns
    -------
    ndarray, shape (2,), uint64
        Bit ``Z − 1`` set for every element (word 0 holds Z = 1…64, word 1 Z = 65…128).

    Raises
    ------
    KeyError
        A symbol that is not an element (callers at the API edge turn it into InputError).
    """
    words = [0, 0]
    for s in symbols:
        z = ATOMIC_NUMBER[s.strip()]
        words[(z - 1) // 64] |= 1 << ((z - 1) % 64)
    return np.array(words, dtype=np.uint64)


def _element_masks(meta: Sequence[dict]) -> np.ndarray:
    out = np.zeros((len(meta), 2), dtype=np.uint64)
    cache: dict[tuple[str, ...], np.ndarray] = {}
    for i, m in enumerate(meta):
        key = tuple(m.get("elements") or ())
        mask = cache.get(key)
        if mask is None:
            mask = cache[key] = element_mask([s for s in key if s in ATOMIC_NUMBER])
        out[i] = mask
    return out


# -- text columns ----------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class TextColumn:
    """Strings stored as one UTF-8 byte blob and offsets; decoded one at a time.

    Attributes
    ----------
    blob : ndarray, shape (B,), uint8
    offsets : ndarray, shape (E + 1,), int64
    """

    blob: np.ndarray
    offsets: np.ndarray

    @classmethod
    def from_strings(cls, values: Sequence[str | None]) -> TextColumn:
        encoded = [(v or "").encode("utf-8") for v in values]
        offsets = np.zeros(len(encoded) + 1, dtype=np.int64)
        np.cumsum([len(b) for b in encoded], out=offsets[1:])
        blob = np.frombuffer(b"".join(encoded), dtype=np.uint8).copy()
        return cls(blob, offsets)

    def __getitem__(self, row: int) -> str:
        a, b = int(self.offsets[row]), int(self.offsets[row + 1])
        return bytes(self.blob[a:b]).decode("utf-8")

    def __len__(self) -> int:
        return int(self.offsets.shape[0] - 1)


# -- strong-line table -----------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class StrongLines:
    """The strongest lines of every entry for one wavelength (see the module docstring).

    Attributes
    ----------
    wavelength : float
        Å, rounded to 1e-4.
    log_d : ndarray, shape (E, K), float32
        ln d of each entry's strong lines (ln Å); NaN pads entries with fewer than K lines.
    weight : ndarray, shape (E, K), float32
        Intensity relative to the entry's strongest line (0–1); 0 on padding.
    sorted_log_d : ndarray, shape (M,), float32
        The ``log_d`` values of lines with weight ≥ :data:`SORTED_MIN_WEIGHT`, increasing.
    sorted_slot : ndarray, shape (M,), int32
        Flat position (row·K + k) in ``log_d`` of each sorted value.
    sorted_entry : ndarray, shape (M,), int32
        Entry row of each sorted value (``sorted_slot // K``), stored so that a window of the
        sorted table is read as contiguous memory.
    sorted_weight : ndarray, shape (M,), float32
        Weight of each sorted value.
    """

    wavelength: float
    log_d: np.ndarray
    weight: np.ndarray
    sorted_log_d: np.ndarray
    sorted_slot: np.ndarray
    sorted_entry: np.ndarray
    sorted_weight: np.ndarray

    @property
    def k(self) -> int:
        return int(self.log_d.shape[1])


def expand_ranges(start: np.ndarray, count: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Concatenate integer ranges ``start[i] … start[i] + count[i] − 1`` without a loop.

    Returns
    -------
    values : ndarray, shape (Σ count,), int64
    owner : ndarray, shape (Σ count,), int64
        Which range each value came from.
    """
    count = np.asarray(count, dtype=np.int64)
    total = int(count.sum())
    owner = np.repeat(np.arange(count.size), count)
    offset = np.arange(total) - np.repeat(np.cumsum(count) - count, count)
    return np.asarray(start, dtype=np.int64)[owner] + offset, owner


def wavelength_key(wavelength: float) -> str:
    """File-name key of a wavelength (Å), rounded to 1e-4 Å, e.g. ``"1.5406"``."""
    return f"{round(float(wavelength), 4):.4f}"


# -- the index -------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class SearchIndex:
    """Every reflection and the per-entry facts the search filters on (module docstring).

    Build with :func:`build_index`, or get the cached copy of a library with
    :func:`load_index`. Arrays may be read-only memory maps.
    """

    stamp: str
    entry_id: np.ndarray
    kind: np.ndarray
    wavelength: np.ndarray
    line_start: np.ndarray
    line_entry: np.ndarray
    d: np.ndarray
    strength: np.ndarray
    elements: np.ndarray
    sg_number: np.ndarray
    volume: np.ndarray
    cell: np.ndarray
    tag_names: tuple[str, ...]
    tag_entry: np.ndarray
    tag_code: np.ndarray
    text: dict[str, TextColumn]
    directory: Path | None = None
    _strong: dict[str, StrongLines] = field(default_factory=dict, repr=False)

    @property
    def n_entries(self) -> int:
        return int(self.entry_id.shape[0])

    @property
    def n_lines(self) -> int:
        return int(self.d.shape[0])

    def row_of(self, entry_ids: Sequence[int] | np.ndarray) -> np.ndarray:
        """Row numbers of library entry ids.

        Raises
        ------
        LibraryError
            An id that is not in the index.
        """
        ids = np.asarray(entry_ids, dtype=np.int64)
        order = np.argsort(self.entry_id, kind="stable")
        pos = np.searchsorted(self.entry_id, ids, sorter=order)
        pos = np.clip(pos, 0, max(self.n_entries - 1, 0))
        rows = order[pos] if self.n_entries else pos
        if ids.size and (self.n_entries == 0 or np.any(self.entry_id[rows] != ids)):
            missing = ids[(self.entry_id[rows] != ids)] if self.n_entries else ids
            raise LibraryError(
                f"entry {int(missing[0])} is not in the search index", "list entries with `refdb library list`"
            )
        return rows.astype(np.int64)

    def text_of(self, column: str, row: int) -> str:
        """One text field (``name``, ``formula``, ``formula_reduced``, ``source_id``,
        ``space_group``) of the entry in ``row``."""
        return self.text[column][int(row)]

    def tags_of(self, row: int) -> tuple[str, ...]:
        sel = self.tag_entry == row
        return tuple(self.tag_names[int(c)] for c in self.tag_code[sel])

    def line_intensity(self, rows: np.ndarray, idx: np.ndarray, wavelength: float, *,
                       monochromator_two_theta: float | None = None) -> tuple[np.ndarray, np.ndarray]:
        """2θ and intensity of chosen reflections for a wavelength.

        Parameters
        ----------
        rows : ndarray, shape (n,), int
            Entry row of each reflection.
        idx : ndarray, shape (n,), int
            Reflection positions in the index.
        wavelength : float
            Primary wavelength in Å.
        monochromator_two_theta : float, optional
            Diffracted-beam monochromator angle (degrees), passed to
            :func:`refdb.geometry.lorentz_polarisation`.

        Returns
        -------
        two_theta, intensity : ndarray, shape (n,)
            2θ in degrees (NaN where the line cannot diffract) and intensity on each entry's
            own arbitrary scale (0 where 2θ is NaN). Measured intensities are converted to
            the wavelength by dividing out LP at their own wavelength (no monochromator).
        """
        d = np.asarray(self.d[idx], dtype=np.float64)
        s = np.asarray(self.strength[idx], dtype=np.float64)
        tt = _two_theta(d, wavelength)
        lp = lorentz_polarisation(tt, monochromator_two_theta=monochromator_two_theta)
        inten = s * lp
        measured = self.kind[rows] == 1
        if np.any(measured):
            lam0 = np.asarray(self.wavelength[rows[measured]], dtype=np.float64)
            lam0 = np.where(np.isfinite(lam0), lam0, wavelength)
            lp0 = lorentz_polarisation(_two_theta(d[measured], lam0))
            inten[measured] = s[measured] * lp[measured] / lp0
        inten = np.where(np.isfinite(inten) & np.isfinite(tt), inten, 0.0)
        return tt, inten

    def strong_lines(self, wavelength: float) -> StrongLines:
        """The strong-line table for a wavelength (Å), built on first use and cached."""
        key = wavelength_key(wavelength)
        table = self._strong.get(key)
        if table is not None:
            return table
        if self.directory is not None:
            table = _load_strong(self.directory, key)
        if table is None:
            table = _build_strong(self, float(key))
            if self.directory is not None:
                _save_strong(self.directory, key, table)
        self._strong[key] = table
        return table

    def save(self, directory: Path) -> None:
        """Write the index (and any strong tables built so far) to a directory, atomically.

        The files go to a sibling temporary directory first and replace ``directory`` in one
        rename, so a reader never sees half an index.

        Raises
        ------
        LibraryError
            The directory cannot be written.
        """
        directory = Path(directory)
        tmp = directory.with_name(directory.name + f".tmp-{os.getpid()}")
        try:
            if tmp.exists():
                shutil.rmtree(tmp)
            tmp.mkdir(parents=True)
            arrays = {name: getattr(self, name) for name in _ARRAY_FIELDS}
            for name, col in self.text.items():
                arrays[f"text_{name}_blob"] = col.blob
                arrays[f"text_{name}_offsets"] = col.offsets
            for name, arr in arrays.items():
                np.save(tmp / f"{name}.npy", np.ascontiguousarray(arr), allow_pickle=False)
            for key, table in self._strong.items():
                _save_strong(tmp, key, table)
            manifest = {
                "format": INDEX_FORMAT,
                "stamp": self.stamp,
                "n_entries": self.n_entries,
                "n_lines": self.n_lines,
                "tag_names": list(self.tag_names),
                "strong_lines": STRONG_LINES,
            }
            (tmp / "manifest.json").write_text(json.dumps(manifest, indent=1), encoding="utf-8")
            if directory.exists():
                shutil.rmtree(directory)
            os.replace(tmp, directory)
        except OSError as exc:
            shutil.rmtree(tmp, ignore_errors=True)
            raise LibraryError(
                f"cannot write the search index to {directory.name}: {exc.strerror or exc}",
                "check that the library's cache folder is writable",
            ) from None


_ARRAY_FIELDS = (
    "entry_id", "kind", "wavelength", "line_start", "line_entry", "d", "strength", "elements",
    "sg_number", "volume", "cell", "tag_entry", "tag_code",
)


def _two_theta(d: np.ndarray, wavelength: float | np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        s = wavelength / (2.0 * d)
        return np.where((s > 0) & (s <= 1.0), 2.0 * np.degrees(np.arcsin(np.clip(s, 0.0, 1.0))), np.nan)


def build_index(arrays: LibraryArrays, *, directory: Path | None = None) -> SearchIndex:
    """Build a :class:`SearchIndex` from the library's flat arrays.

    Parameters
    ----------
    arrays : LibraryArrays
        From :meth:`Library.arrays`, or built by hand (tests, benchmarks).
    directory : Path, optional
        Where the index will live; strong tables built later are saved there.

    Raises
    ------
    LibraryError
        Arrays of inconsistent lengths.
    """
    e = arrays.n_entries
    r = int(arrays.d.shape[0])
    start = np.asarray(arrays.line_start, dtype=np.int64)
    if start.shape != (e + 1,) or (e and (start[0] != 0 or start[-1] != r)) or np.any(np.diff(start) < 0):
        raise LibraryError("the library's reflection offsets are inconsistent", "rebuild the library")
    meta = arrays.meta if len(arrays.meta) == e else tuple({} for _ in range(e))
    kind = np.asarray(arrays.kind, dtype=np.int8)
    line_entry = np.repeat(np.arange(e, dtype=np.int32), np.diff(start))
    mult = np.asarray(arrays.multiplicity, dtype=np.float64)
    mult = np.where(mult > 0, mult, 1.0)
    f2 = np.asarray(arrays.f2, dtype=np.float64)
    inten = np.asarray(arrays.intensity, dtype=np.float64)
    measured_line = kind[line_entry] == 1
    strength = np.where(measured_line, inten, mult * f2)
    strength = np.where(np.isfinite(strength) & (strength > 0), strength, 0.0).astype(np.float32)

    tag_names = tuple(sorted({t for m in meta for t in (m.get("tags") or ())}))
    code_of = {t: i for i, t in enumerate(tag_names)}
    pairs = [(i, code_of[t]) for i, m in enumerate(meta) for t in (m.get("tags") or ())]
    tag_arr = np.array(pairs, dtype=np.int32).reshape(-1, 2)

    cell = np.full((e, 6), np.nan, dtype=np.float32)
    for i, m in enumerate(meta):
        c = m.get("cell")
        if c is not None and len(c) == 6 and all(v is not None for v in c):
            cell[i] = c
    index = SearchIndex(
        stamp=arrays.stamp,
        entry_id=np.asarray(arrays.entry_id, dtype=np.int64),
        kind=kind,
        wavelength=np.asarray(arrays.wavelength, dtype=np.float32),
        line_start=start,
        line_entry=line_entry,
        d=np.asarray(arrays.d, dtype=np.float32),
        strength=strength,
        elements=_element_masks(meta),
        sg_number=np.array([m.get("sg_number") or 0 for m in meta], dtype=np.int16),
        volume=np.array([np.nan if m.get("volume") is None else m["volume"] for m in meta], dtype=np.float32),
        cell=cell,
        tag_names=tag_names,
        tag_entry=tag_arr[:, 0].copy(),
        tag_code=tag_arr[:, 1].copy(),
        text={c: TextColumn.from_strings([m.get(c) for m in meta]) for c in _TEXT_COLUMNS},
        directory=directory,
    )
    return index


def _build_strong(index: SearchIndex, wavelength: float) -> StrongLines:
    """Segmented top-K of line intensities, entry by entry, without a loop over entries."""
    e, k = index.n_entries, STRONG_LINES
    log_d = np.full((e, k), np.nan, dtype=np.float32)
    weight = np.zeros((e, k), dtype=np.float32)
    start = index.line_start
    row0 = 0
    while row0 < e:
        # Take entries until the chunk holds about _CHUNK_LINES reflections (at least one).
        row1 = int(np.searchsorted(start, start[row0] + _CHUNK_LINES, side="right")) - 1
        row1 = min(max(row1, row0 + 1), e)
        a, b = int(start[row0]), int(start[row1])
        rows = np.asarray(index.line_entry[a:b], dtype=np.int64)
        tt, inten = index.line_intensity(rows, np.arange(a, b), wavelength)
        ok = np.isfinite(tt) & (tt <= STRONG_MAX_TWO_THETA) & (inten > 0)
        top = np.zeros(row1 - row0)
        np.maximum.at(top, rows[ok] - row0, inten[ok])
        rel = np.where(ok, inten / np.where(top[rows - row0] > 0, top[rows - row0], 1.0), 0.0)
        # Sort by (row, −rel): rows ascending, strongest first inside each row.
        order = np.lexsort((-rel, rows))
        srows = rows[order]
        first = np.searchsorted(srows, srows, side="left")
        rank = np.arange(order.size) - first
        keep = (rank < k) & (rel[order] > 0)
        sel = order[keep]
        log_d[srows[keep], rank[keep]] = np.log(np.asarray(index.d[a:b], dtype=np.float64)[sel])
        weight[srows[keep], rank[keep]] = rel[sel]
        row0 = row1
    flat = log_d.ravel()
    slots = np.flatnonzero(np.isfinite(flat) & (weight.ravel() >= SORTED_MIN_WEIGHT)).astype(np.int32)
    order = np.argsort(flat[slots], kind="stable")
    slots = slots[order]
    return StrongLines(
        wavelength=wavelength,
        log_d=log_d,
        weight=weight,
        sorted_log_d=flat[slots],
        sorted_slot=slots,
        sorted_entry=(slots // k).astype(np.int32),
        sorted_weight=weight.reshape(-1)[slots],
    )


def _strong_files(directory: Path, key: str) -> dict[str, Path]:
    return {n: directory / f"strong{_STRONG_LAYOUT}_{key}_{n}.npy"
            for n in ("log_d", "weight", "sorted_log_d", "sorted_slot", "sorted_entry", "sorted_weight")}


def _save_strong(directory: Path, key: str, table: StrongLines) -> None:
    try:
        for name, path in _strong_files(directory, key).items():
            tmp = path.with_name(path.name + f".tmp-{os.getpid()}.npy")
            np.save(tmp, np.ascontiguousarray(getattr(table, name)), allow_pickle=False)
            os.replace(tmp, path)
    except OSError:
        # The cache is only a copy: failing to write it costs time on the next run, not data.
        return


def _load_strong(directory: Path, key: str) -> StrongLines | None:
    files = _strong_files(directory, key)
    if not all(p.exists() for p in files.values()):
        return None
    try:
        arrs = {n: np.load(p, mmap_mode="r", allow_pickle=False).view(np.ndarray) for n, p in files.items()}
    except (OSError, ValueError):
        return None
    return StrongLines(wavelength=float(key), **arrs)


def read_index(directory: Path, *, mmap: bool = True) -> SearchIndex:
    """Read an index written by :meth:`SearchIndex.save`.

    Parameters
    ----------
    directory : Path
    mmap : bool
        Memory-map the large arrays (read-only) instead of reading them into memory.

    Raises
    ------
    LibraryError
        Missing or unreadable files, or an index of another format version.
    """
    directory = Path(directory)
    try:
        manifest = json.loads((directory / "manifest.json").read_text(encoding="utf-8"))
        if manifest.get("format") != INDEX_FORMAT or manifest.get("strong_lines") != STRONG_LINES:
            raise LibraryError("the search index was written by another version of refdb", "it will be rebuilt")
        mode = "r" if mmap else None
        arr: dict[str, Any] = {
            name: np.load(directory / f"{name}.npy", mmap_mode=mode, allow_pickle=False) for name in _ARRAY_FIELDS
        }
        text = {
            c: TextColumn(
                np.load(directory / f"text_{c}_blob.npy", mmap_mode=mode, allow_pickle=False),
                np.load(directory / f"text_{c}_offsets.npy", allow_pickle=False),
            )
            for c in _TEXT_COLUMNS
        }
    except (OSError, ValueError, KeyError, json.JSONDecodeError) as exc:
        raise LibraryError(f"cannot read the search index in {directory.name}: {exc}", "it will be rebuilt") from None
    # Small per-entry arrays are read into memory; the per-reflection ones stay mapped, seen
    # as plain ndarray views (numpy's memmap subclass makes every slice cost a Python call).
    for name in ("entry_id", "kind", "wavelength", "line_start", "elements", "sg_number", "tag_entry", "tag_code"):
        arr[name] = np.array(arr[name])
    for name, value in arr.items():
        if isinstance(value, np.memmap):
            arr[name] = value.view(np.ndarray)
    text = {c: TextColumn(col.blob.view(np.ndarray) if isinstance(col.blob, np.memmap) else col.blob, col.offsets)
            for c, col in text.items()}
    return SearchIndex(
        stamp=str(manifest["stamp"]),
        tag_names=tuple(manifest.get("tag_names", ())),
        text=text,
        directory=directory,
        **arr,
    )


def load_index(library: _LibraryLike, *, rebuild: bool = False) -> SearchIndex:
    """The library's search index: the cached copy if its stamp matches, else a fresh build.

    Parameters
    ----------
    library : Library
        An open library (anything with ``stamp()``, ``arrays()`` and ``cache_dir()``).
    rebuild : bool
        Ignore the cached copy.

    Returns
    -------
    SearchIndex
        Memory-mapped from ``library.cache_dir() / "search-index-v1"``. If the cache cannot
        be written, the freshly built index is returned from memory.

    Raises
    ------
    LibraryError
        The library cannot be read.
    """
    directory = Path(library.cache_dir()) / _INDEX_DIR
    stamp = library.stamp()
    if not rebuild and (directory / "manifest.json").exists():
        try:
            cached = read_index(directory)
        except LibraryError:
            cached = None
        if cached is not None and cached.stamp == stamp:
            return cached
    index = build_index(library.arrays(), directory=None)
    try:
        index.save(directory)
    except LibraryError:
        return index
    return read_index(directory)
