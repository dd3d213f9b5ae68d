"""Many scans at once: search or decomposition in parallel worker processes.

Each worker opens the library once (by its URL) and reads the cached search index; each scan
yields one :class:`ScanOutcome`, and a scan that cannot be read or analysed yields an outcome
with ``ok=False`` and a one-line message instead of stopping the batch.

Workers are started with the ``spawn`` method and with ``OPENBLAS_NUM_THREADS=1`` (and the
OpenMP equivalent) in their environment unless the caller set them: each worker's matrices
are small, and several BLAS threads per worker only fight over the cores. Each worker keeps
freed memory in its heap (:func:`refdb.allocator.keep_freed_memory`).
"""

from __future__ import annotations

import os
from collections import OrderedDict
from collections.abc import Callable, Iterable, Sequence
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass, field
from multiprocessing import get_context
from pathlib import Path
from typing import Any

from refdb.allocator import keep_freed_memory
from refdb.errors import InputError, RefdbError

MODES: tuple[str, ...] = ("unmix", "search")

#: The library and index a worker process opened, keyed by library URL.
_WORKER_CACHE: dict[str, Any] = {}
#: Most library entries a worker keeps in memory between scans.
REMEMBERED_ENTRIES = 500


@dataclass(frozen=True)
class BatchOptions:
    """What every scan of a batch is analysed with (picklable, sent to the workers).

    ``anode``/``wavelength`` apply when a file does not state its radiation; ``fmt`` is the
    scan format name; ``decompose`` holds keyword arguments of
    :func:`refdb.match.mixture.decompose` (filters, ``max_phases``, ``standard``…);
    ``top`` is the number of search candidates kept in search mode; ``report_dir`` receives
    one HTML report per scan in unmix mode when given.
    """

    library_url: str | None
    mode: str = "unmix"
    anode: str | None = None
    wavelength: float | None = None
    fmt: str = "auto"
    decompose: dict[str, Any] = field(default_factory=dict)
    top: int = 5
    report_dir: str | None = None


@dataclass(frozen=True)
class ScanOutcome:
    """Result of one scan: ``ok`` with a JSON-ready ``result``, or a one-line ``error``."""

    scan: str
    ok: bool
    result: dict[str, Any] | None = None
    error: str = ""
    report: str | None = None


def collect_scans(inputs: Iterable[str | Path]) -> list[Path]:
    """Expand folders (their visible regular files, sorted) and keep files as given.

    Raises
    ------
    InputError
        A path that does not exist, or nothing to analyse.
    """
    found: list[Path] = []
    for item in inputs:
        p = Path(item)
        if p.is_dir():
            found.extend(sorted(f for f in p.iterdir() if f.is_file() and not f.name.startswith(".")))
        elif p.is_file():
            found.append(p)
        else:
            raise InputError(f"{p} does not exist", "give scan files or folders of scan files")
    if not found:
        raise InputError("no scan files to analyse", "the folders given are empty")
    return found


def analyse_scan(path: str | Path, options: BatchOptions) -> ScanOutcome:
    """Analyse one scan in this process; errors become an outcome with ``ok=False``."""
    name = Path(path).name
    try:
        lib, index = _library(options.library_url)
        from refdb.radiation import radiation_for
        from refdb.scan import load_scan

        radiation = None
        if options.anode or options.wavelength:
            radiation = radiation_for(options.anode, wavelength=options.wavelength)
        scan = load_scan(path, radiation=radiation, fmt=options.fmt)
        if options.mode == "search":
            return ScanOutcome(name, True, _search_summary(scan, index, options))
        from refdb.match.mixture import decompose

        result = decompose(scan, lib, index=index, **options.decompose)
        report = None
        if options.report_dir:
            from refdb.report.html import write_mixture_html

            report = str(write_mixture_html(result, Path(options.report_dir) / f"{Path(path).stem}.html"))
        return ScanOutcome(name, True, result.as_dict(), report=report)
    except RefdbError as exc:
        return ScanOutcome(name, False, error=exc.one_line())
    except Exception as exc:  # one bad scan must not stop the batch; say what happened
        return ScanOutcome(name, False, error=f"unexpected {type(exc).__name__}: {' '.join(str(exc).split())}")


def _search_summary(scan, index, options: BatchOptions) -> dict[str, Any]:
    from refdb.match.search import search
    from refdb.scan import find_peaks

    d = options.decompose
    ps = find_peaks(scan)
    if len(ps.peaks) == 0:
        return {"scan": scan.source, "candidates": [], "peaks": 0}
    res = search(
        ps.peaks, index, scan=scan, background=ps.background, top=options.top,
        elements_required=d.get("elements_required", ()), elements_allowed=d.get("elements_allowed"),
        elements_excluded=d.get("elements_excluded", ()), tags=d.get("tags", ()), kind=d.get("kind"),
    )
    return {
        "scan": scan.source,
        "peaks": len(ps.peaks),
        "candidates": [
            {"entry_id": c.entry_id, "source_id": c.source_id, "name": c.name, "formula": c.formula,
             "score": float(c.score)}
            for c in res.candidates
        ],
    }


def _library(url: str | None):
    key = url or ""
    if key not in _WORKER_CACHE:
        from refdb.library import open_library
        from refdb.match.index import load_index

        lib = open_library(url)
        _WORKER_CACHE[key] = (_RememberedEntries(lib), load_index(lib))
    return _WORKER_CACHE[key]


class _RememberedEntries:
    """The library as :func:`refdb.match.mixture.decompose` reads it, keeping the entries it
    has read: the scans of a batch mostly ask for the same few dozen common phases, and reading
    an entry with its reflections costs milliseconds. At most :data:`REMEMBERED_ENTRIES` are
    kept (least recently used go first). The library is taken not to change during a batch, so
    its stamp is read once too; :func:`run_batch` starts every batch afresh.
    """

    def __init__(self, library) -> None:
        self._library = library
        self._entries: OrderedDict[int, Any] = OrderedDict()
        self._stamp: str | None = None

    def close(self) -> None:
        self._library.close()

    def stamp(self) -> str:
        if self._stamp is None:
            self._stamp = self._library.stamp()
        return self._stamp

    def get_many(self, ids: Iterable[int]) -> list:
        wanted = [int(i) for i in ids]
        missing = [i for i in dict.fromkeys(wanted) if i not in self._entries]
        if missing:
            for entry in self._library.get_many(missing):
                self._entries[entry.id] = entry
        for i in wanted:
            if i in self._entries:
                self._entries.move_to_end(i)
        while len(self._entries) > REMEMBERED_ENTRIES:
            self._entries.popitem(last=False)
        return [self._entries[i] for i in wanted if i in self._entries]


def run_batch(
    paths: Sequence[str | Path],
    options: BatchOptions,
    *,
    workers: int = 2,
    on_done: Callable[[ScanOutcome], None] | None = None,
) -> list[ScanOutcome]:
    """Analyse ``paths`` with ``workers`` processes (1: in this process), in input order.

    Parameters
    ----------
    paths : sequence of path
    options : BatchOptions
    workers : int
        Worker processes, ≥ 1. Default 2.
    on_done : callable, optional
        Called in this process with each outcome as it finishes (for a progress bar).

    Raises
    ------
    InputError
        Unknown mode, ``workers`` < 1, or a report folder that cannot be made.
    """
    if options.mode not in MODES:
        raise InputError(f"unknown batch mode {options.mode!r}", f"choose {' or '.join(MODES)}")
    if workers < 1:
        raise InputError("workers must be at least 1")
    if options.report_dir:
        try:
            Path(options.report_dir).mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise InputError(f"cannot make the report folder {options.report_dir}: {exc.strerror}") from None
    # Open the library here first: a missing library fails once, and the search index is
    # built (and cached) once before the workers read it. What an earlier batch in this
    # process remembered is dropped: the library may have changed since.
    earlier = _WORKER_CACHE.pop(options.library_url or "", None)
    if earlier is not None:
        earlier[0].close()
    _library(options.library_url)
    outcomes: dict[int, ScanOutcome] = {}
    if workers == 1 or len(paths) == 1:
        for i, p in enumerate(paths):
            outcomes[i] = analyse_scan(p, options)
            if on_done:
                on_done(outcomes[i])
    else:
        saved = {k: os.environ.get(k) for k in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS")}
        for k in saved:
            os.environ.setdefault(k, "1")
        try:
            with ProcessPoolExecutor(max_workers=workers, mp_context=get_context("spawn"),
                                     initializer=keep_freed_memory) as pool:
                futures = {pool.submit(analyse_scan, str(p), options): i for i, p in enumerate(paths)}
                for fut in as_completed(futures):
                    i = futures[fut]
                    outcomes[i] = fut.result()
                    if on_done:
                        on_done(outcomes[i])
        finally:
            for k, v in saved.items():
                if v is None:
                    os.environ.pop(k, None)
                else:
                    os.environ[k] = v
    return [outcomes[i] for i in range(len(paths))]


def summary_rows(outcomes: Sequence[ScanOutcome]) -> list[dict[str, Any]]:
    """One flat row per scan for a CSV summary (a stable contract).

    Columns: scan, status (``ok``/``error``), message, phases (``name [entry] w%`` joined by
    ``; ``), entry_ids, weight_fractions (``;``-separated, 0–1), rwp, gof, unexplained_peaks,
    report.
    """
    rows = []
    for o in outcomes:
        row: dict[str, Any] = {"scan": o.scan, "status": "ok" if o.ok else "error", "message": o.error,
                               "phases": "", "entry_ids": "", "weight_fractions": "", "rwp": "", "gof": "",
                               "unexplained_peaks": "", "report": o.report or ""}
        r = o.result or {}
        if o.ok and "phases" in r:
            ph = r["phases"]
            row["phases"] = "; ".join(
                f"{p['name']} [{p['entry_id']}] " + (f"{100 * p['weight_fraction']:.1f}%" if p["weight_fraction"] is not None else "n/q")
                for p in ph
            )
            row["entry_ids"] = ";".join(str(p["entry_id"]) for p in ph)
            row["weight_fractions"] = ";".join("" if p["weight_fraction"] is None else f"{p['weight_fraction']:.4f}" for p in ph)
            row["rwp"] = r["fit"]["rwp"] if r["fit"]["rwp"] is not None else ""
            row["gof"] = r["fit"]["gof"] if r["fit"]["gof"] is not None else ""
            row["unexplained_peaks"] = len(r["unexplained_peaks"])
        elif o.ok and "candidates" in r:
            row["phases"] = "; ".join(f"{c['name']} [{c['entry_id']}] score {c['score']:.0f}" for c in r["candidates"])
            row["entry_ids"] = ";".join(str(c["entry_id"]) for c in r["candidates"])
        rows.append(row)
    return rows
