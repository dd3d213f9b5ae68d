"""Bringing references into the library: CIF files and folders, measured peak lists.

Structures are read and their reflections computed in worker processes (both cores for large
imports); the main process writes each entry in its own transaction. A failure in one file is
reported and the import goes on; a killed import leaves only whole entries, and running it
again adds the rest without duplicates (entries are keyed by their content hash).
"""

from __future__ import annotations

import os
from collections.abc import Callable, Iterable
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from refdb.chem import elements_of, hill_formula, parse_formula
from refdb.errors import InputError, RefdbError
from refdb.library.repository import Library
from refdb.records import PatternLines, ReferenceData, structure_hash

#: Imports with at least this many files use a process pool.
PARALLEL_THRESHOLD = 24


@dataclass(frozen=True)
class ImportReport:
    """What an import did, file by file."""

    imported: tuple[tuple[str, int], ...] = ()
    present: tuple[tuple[str, int], ...] = ()
    failed: tuple[tuple[str, str], ...] = ()
    entries: tuple[int, ...] = field(default=())

    @property
    def total(self) -> int:
        return len(self.imported) + len(self.present) + len(self.failed)


def collect_cif_files(paths: Iterable[str | os.PathLike]) -> list[Path]:
    """Files given directly, plus every ``*.cif`` below given folders (sorted, no duplicates).

    Raises
    ------
    InputError
        A path that does not exist.
    """
    found: dict[Path, None] = {}
    for p in paths:
        path = Path(p).expanduser()
        if path.is_dir():
            for f in sorted(path.rglob("*")):
                if f.is_file() and f.suffix.lower() == ".cif":
                    found[f.resolve()] = None
        elif path.is_file():
            found[path.resolve()] = None
        else:
            raise InputError(f"no such file or folder: {p}")
    return list(found)


def _compute(path: Path, d_min: float) -> ReferenceData | str:
    """Worker: read one CIF and compute its reference, or return a one-line reason."""
    from refdb.structure import reference_from_cif

    try:
        return reference_from_cif(path, d_min=d_min)
    except RefdbError as exc:
        return exc.one_line()
    except Exception as exc:  # a structure our code cannot handle must not stop the batch
        return f"unexpected {type(exc).__name__}: {' '.join(str(exc).split())[:200]}"


def _read_text(path: Path) -> str | None:
    try:
        return path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError):
        return None


def import_cifs(
    library: Library,
    paths: Iterable[str | os.PathLike],
    *,
    d_min: float = 0.7,
    tags: Iterable[str] = (),
    workers: int | None = None,
    progress: Callable[[int, int, str], None] | None = None,
) -> ImportReport:
    """Import CIF files and folders (recursively) into ``library``.

    Parameters
    ----------
    library : Library
    paths : files or folders
    d_min : float
        Smallest d-spacing (Å) of the computed reflections.
    tags : tags given to every new entry.
    workers : processes for the structure computations; default 2 for large imports.
    progress : called as ``progress(done, total, file_name)`` after each file.
    """
    files = collect_cif_files(paths)
    tags = tuple(tags)
    imported: list[tuple[str, int]] = []
    present: list[tuple[str, int]] = []
    failed: list[tuple[str, str]] = []
    total = len(files)
    done = 0

    # Files already in the library are recognised by their text alone: no computation.
    digests: dict[Path, str] = {}
    for f in files:
        text = _read_text(f)
        if text is not None:
            digests[f] = structure_hash(text)
    known = library.find_hashes(digests.values())
    todo: list[Path] = []
    for f in files:
        existing = known.get(digests.get(f, ""))
        if existing is None:
            todo.append(f)
            continue
        present.append((str(f), existing))
        done += 1
        if progress:
            progress(done, total, f.name)

    def record(f: Path, result: ReferenceData | str) -> None:
        nonlocal done
        if isinstance(result, str):
            failed.append((str(f), result))
        else:
            if tags:
                result = _with_tags(result, tags)
            try:
                added = library.add(result)
            except InputError as exc:
                failed.append((str(f), exc.one_line()))
            else:
                (imported if added.created else present).append((str(f), added.entry_id))
        done += 1
        if progress:
            progress(done, total, f.name)

    n_workers = workers if workers is not None else (min(2, os.cpu_count() or 1) if len(todo) >= PARALLEL_THRESHOLD else 1)
    if n_workers > 1 and len(todo) > 1:
        with ProcessPoolExecutor(max_workers=n_workers) as pool:
            chunk = max(1, min(16, len(todo) // (n_workers * 8) or 1))
            for f, result in zip(todo, pool.map(_compute, todo, [d_min] * len(todo), chunksize=chunk), strict=True):
                record(f, result)
    else:
        for f in todo:
            record(f, _compute(f, d_min))
    return ImportReport(
        imported=tuple(imported),
        present=tuple(present),
        failed=tuple(failed),
        entries=tuple(i for _, i in imported + present),
    )


def _with_tags(data: ReferenceData, tags: tuple[str, ...]) -> ReferenceData:
    from dataclasses import replace

    return replace(data, tags=tuple(sorted(set(data.tags) | set(tags))))


def measured_reference(
    d: np.ndarray,
    intensity: np.ndarray,
    *,
    wavelength: float,
    name: str,
    formula: str,
    source: str = "in-house",
    source_id: str | None = None,
    file_name: str | None = None,
    licence: str | None = None,
    rir: float | None = None,
    notes: str = "",
    tags: Iterable[str] = (),
    hkl: np.ndarray | None = None,
) -> ReferenceData:
    """A measured reference from a peak list (d in Å, intensities scaled to 0–100).

    Raises
    ------
    InputError
        Empty list, non-positive d, negative intensities, unknown elements in the formula.
    """
    d = np.asarray(d, dtype=float)
    inten = np.asarray(intensity, dtype=float)
    if d.size == 0:
        raise InputError(f"{name}: the peak list is empty")
    if d.shape != inten.shape:
        raise InputError(f"{name}: {d.size} d-spacings but {inten.size} intensities")
    if not np.all(np.isfinite(d)) or np.any(d <= 0):
        raise InputError(f"{name}: d-spacings must be positive")
    if not np.all(np.isfinite(inten)) or np.any(inten < 0) or inten.max() <= 0:
        raise InputError(f"{name}: intensities must be non-negative with at least one above zero")
    if rir is not None and not (0 < rir < 100):
        raise InputError(f"RIR {rir} is outside (0, 100)", "I/Ic is relative to corundum = 1")
    order = np.argsort(-d, kind="stable")
    counts = parse_formula(formula)
    return ReferenceData(
        kind="measured",
        name=name,
        formula=formula,
        formula_reduced=hill_formula(counts),
        elements=elements_of(formula),
        lines=PatternLines(
            d=d[order],
            intensity=np.round(inten[order] * (100.0 / inten.max()), 4),
            hkl=None if hkl is None else np.asarray(hkl, dtype=int)[order],
        ),
        wavelength=float(wavelength),
        source=source,
        source_id=source_id,
        file_name=file_name,
        licence=licence,
        rir=rir,
        notes=notes,
        tags=tuple(tags),
    )
