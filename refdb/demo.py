"""The worked demonstration: the seed library and demo scans shipped with refdb.

The scenario is invented: a corroded steel pipe flange from a coastal site, with a rust sample,
a pigment check sample with a silicon internal standard, and a white deposit. The scans were
simulated with refdb from the seed structures; each says so in its header and records the
composition used (``# demo-answer: name=fraction, …``), which the demo compares with what it
finds.
"""

from __future__ import annotations

import re
from collections.abc import Callable
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path

from refdb.errors import InputError


@dataclass(frozen=True)
class DemoScan:
    """One demo scan and its invented answer (mineral name → weight fraction)."""

    path: Path
    name: str
    title: str
    answer: dict[str, float]


@dataclass(frozen=True, eq=False)
class DemoOutcome:
    """What the demo found for one scan."""

    scan: DemoScan
    search: object  # refdb.match.search.SearchResult
    mixture: object  # refdb.match.mixture.MixtureResult
    found: dict[str, float]  # mineral name (lower case) → refined weight fraction
    missed: tuple[str, ...]
    extra: tuple[str, ...]
    report: Path | None = None
    plot: Path | None = None


@dataclass(frozen=True, eq=False)
class DemoRun:
    library: Path
    library_stamp: str
    imported: int
    outcomes: tuple[DemoOutcome, ...] = field(default=())


def _seeds() -> Path:
    return Path(str(resources.files("refdb._seeds")))


def seed_structure_dir() -> Path:
    """The folder of seed CIFs inside the installed package."""
    return _seeds() / "structures"


def demo_scans() -> list[DemoScan]:
    """The demo scans shipped with refdb, with the answers written in their headers."""
    out = []
    for path in sorted((_seeds() / "scans").glob("*.xy")):
        header = []
        with open(path, encoding="utf-8") as fh:
            for line in fh:
                if not line.startswith("#"):
                    break
                header.append(line[1:].strip())
        answer: dict[str, float] = {}
        title = header[0] if header else path.stem
        for line in header:
            m = re.match(r"demo-answer:\s*(.+)$", line)
            if m and "=" in m.group(1):
                for part in m.group(1).split(","):
                    key, _, val = part.partition("=")
                    answer[key.strip().lower()] = float(val)
        out.append(DemoScan(path=path, name=path.stem, title=title, answer=answer))
    if not out:
        raise InputError("no demo scans found in the installed package", "reinstall refdb")
    return out


def _phase_label(name: str | None, mineral: str | None) -> str:
    return (mineral or name or "").strip().lower()


def run_demo(
    out_dir: Path,
    *,
    progress: Callable[[str], None] | None = None,
    reports: bool = True,
) -> DemoRun:
    """Build (or reuse) the seed library in ``out_dir`` and run search and unmix on each scan.

    Writes ``seed-library.sqlite``, and with ``reports`` an HTML report and a PNG plot per
    scan. Returns everything found, for the CLI to print and the tests to check.
    """
    from refdb.library import open_library
    from refdb.library.ingest import import_cifs
    from refdb.match.index import load_index
    from refdb.match.mixture import decompose
    from refdb.match.search import search
    from refdb.scan import find_peaks, load_scan

    say = progress or (lambda _msg: None)
    out_dir.mkdir(parents=True, exist_ok=True)
    db = out_dir / "seed-library.sqlite"
    say(f"seed library: {db}")
    with open_library(db, create=True) as lib:
        rep = import_cifs(lib, [seed_structure_dir()], tags=("seed",), workers=1)
        if rep.failed:
            f, reason = rep.failed[0]
            raise InputError(f"seed structure {Path(f).name} failed to import: {reason}")
        index = load_index(lib)
        entries = {e.id: e for e in lib.get_many(int(i) for i in index.entry_id)}
        outcomes = []
        for demo in demo_scans():
            say(f"scan: {demo.name}")
            scan = load_scan(demo.path)
            peaks = find_peaks(scan)
            found_search = search(peaks.peaks, index, scan=scan, background=peaks.background, top=10)
            mixture = decompose(scan, lib, index=index)
            found: dict[str, float] = {}
            for ph in mixture.phases:
                e = entries.get(ph.entry_id) if ph.entry_id is not None else None
                label = _phase_label(ph.name, e.mineral_name if e else None)
                found[label] = found.get(label, 0.0) + float(ph.weight_fraction)
            missed = tuple(k for k in demo.answer if k not in found)
            extra = tuple(k for k in found if k not in demo.answer)
            report = plot = None
            if reports:
                from refdb.report.html import write_mixture_html
                from refdb.report.mixture_plot import save_mixture_plot

                report = write_mixture_html(mixture, out_dir / f"{demo.name}-report.html")
                plot = save_mixture_plot(mixture, out_dir / f"{demo.name}.png")
            outcomes.append(
                DemoOutcome(
                    scan=demo, search=found_search, mixture=mixture, found=found,
                    missed=missed, extra=extra, report=report, plot=plot,
                )
            )
        return DemoRun(
            library=db, library_stamp=lib.stamp(), imported=len(rep.imported), outcomes=tuple(outcomes)
        )
