"""Search speed and memory on synthetic libraries of 10k, 100k and 1M entries.

Each invented entry has about 100 reflections (Poisson, 20–250) with d-spacings drawn
uniformly in 1/d³ between d_max (3–15 Å) and 0.8 Å — the density of reflections of a real
cell grows like the volume of reciprocal space — random |F|² with a Debye–Waller-like
fall-off, and multiplicities 2–24. Unknowns are 30-peak lists made from random entries (the 30
strongest Cu Kα1 lines in 10–80° 2θ, lines closer than 0.05° merged, 0.01° position noise, a
zero shift up to ±0.05°, two foreign peaks). Everything here is invented for the benchmark.

Measured, per size:

* build time of the index and its Cu strong-line table (once; cached in the temp folder);
* warm search: median over the queries of :func:`refdb.match.search.search` for the leading 50
  candidates, peak list only (no profile check), after one warm-up query;
* cold run: a fresh Python process that imports refdb, loads the cached index
  (:func:`refdb.match.index.read_index`, memory-mapped), builds the query (which imports
  refdb.scan for PeakList) and runs one search — its wall time, the time of each part, and
  peak resident memory (VmHWM on Linux, else ``ru_maxrss``);
* how often the source entry of a query is ranked first (a sanity check, not accuracy).

Goals (1M entries): warm median ≤ 100 ms, cold ≤ 5 s, peak memory ≤ 2 GB.

Usage::

    python benchmarks/bench_search_speed.py --smoke        # 10k entries (CI)
    python benchmarks/bench_search_speed.py                # 10k, 100k, 1M
    python benchmarks/bench_search_speed.py --sizes 100000 --queries 40
"""

from __future__ import annotations

import argparse
import json
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

LAMBDA = 1.54059292  # Cu Kα1, Å (ITC Vol. C 2006, Table 4.2.2.6)
ELEMENTS = ("O", "Si", "Al", "Fe", "Ca", "Mg", "Na", "K", "Ti", "Zn", "Cu", "C", "H", "S", "Cl", "Mn", "Ba", "Pb")


def synthetic_arrays(n: int, seed: int):
    """An invented library as LibraryArrays (float32 arrays to keep the 1M build in memory)."""
    from refdb.records import LibraryArrays

    rng = np.random.default_rng(seed)
    count = np.clip(rng.poisson(100, n), 20, 250).astype(np.int64)
    start = np.zeros(n + 1, dtype=np.int64)
    np.cumsum(count, out=start[1:])
    total = int(start[-1])
    owner = np.repeat(np.arange(n, dtype=np.int32), count)
    d_max = rng.uniform(3.0, 15.0, n).astype(np.float32)[owner]
    u = rng.random(total, dtype=np.float32)
    inv3 = 1.0 / d_max**3 + u * (1.0 / np.float32(0.8) ** 3 - 1.0 / d_max**3)
    d = inv3 ** (-1.0 / 3.0)
    # Descending d inside each entry: sort by (owner, -d).
    order = np.lexsort((-d, owner))
    d = d[order].astype(np.float32)
    f2 = (rng.exponential(1.0, total).astype(np.float32) * np.exp(-0.5 / d**2) * 1000.0).astype(np.float32)
    mult = rng.choice(np.array([2, 4, 6, 8, 12, 24], dtype=np.int32), total)
    n_el = rng.integers(1, 5, n)
    meta = tuple(
        {"name": f"invented {i}", "formula": f"X{i}", "formula_reduced": f"X{i}", "source_id": f"inv-{i}",
         "space_group": "P 1", "sg_number": 1, "elements": tuple(ELEMENTS[j] for j in rng.choice(18, k, replace=False)),
         "tags": (), "volume": None, "cell": None}
        for i, k in enumerate(n_el)
    )
    return LibraryArrays(
        entry_id=np.arange(1, n + 1, dtype=np.int64), kind=np.zeros(n, np.int8), wavelength=np.full(n, np.nan),
        line_start=start, line_entry=owner, d=d, multiplicity=mult, f2=f2,
        intensity=np.full(total, np.nan, dtype=np.float32), meta=meta, stamp=f"bench-{n}-{seed}",
    )


def query_peaks(index, row: int, rng: np.random.Generator):
    """A 30-peak unknown from entry ``row`` (module docstring)."""
    from refdb.radiation import radiation_for
    from refdb.scan.types import PeakList

    a, b = int(index.line_start[row]), int(index.line_start[row + 1])
    d = np.asarray(index.d[a:b], dtype=float)
    s = LAMBDA / (2 * d)
    ok = s < 1
    tt = 2 * np.degrees(np.arcsin(s[ok]))
    t = np.radians(tt)
    inten = np.asarray(index.strength[a:b], dtype=float)[ok] * (1 + np.cos(t) ** 2) / (np.sin(t / 2) ** 2 * np.cos(t / 2))
    sel = (tt > 10) & (tt < 80)
    tt, inten = tt[sel], inten[sel]
    o = np.argsort(tt)
    tt, inten = tt[o], inten[o]
    group = np.concatenate([[0], np.cumsum(np.diff(tt) > 0.05)])
    w = np.bincount(group, weights=inten)
    tt = np.bincount(group, weights=tt * inten) / w
    strongest = np.sort(np.argsort(-w)[:30])
    tt, w = tt[strongest], w[strongest]
    tt = tt + rng.uniform(-0.05, 0.05) + rng.normal(0, 0.01, tt.size)
    tt = np.concatenate([tt, rng.uniform(12, 78, 2)])
    w = np.concatenate([w, np.full(2, np.median(w))])
    o = np.argsort(tt)
    tt, w = tt[o], w[o]
    n = tt.size
    nan = np.full(n, np.nan)
    return PeakList(
        two_theta=tt, d=LAMBDA / (2 * np.sin(np.radians(tt) / 2)), height=w, area=w, fwhm=np.full(n, 0.1),
        eta=np.full(n, 0.5), u_two_theta=nan, u_height=nan, u_area=nan, u_fwhm=nan, significance=np.full(n, 30.0),
        radiation=radiation_for("Cu"), two_theta_range=(10.0, 80.0), source="invented",
    )


def ensure_index(n: int, seed: int, folder: Path) -> tuple[Path, float | None]:
    """Build (or reuse) the index of an invented library; returns its folder and build time."""
    from refdb.match.index import build_index, read_index

    target = folder / f"refdb-bench-index-{n}-{seed}"
    if (target / "manifest.json").exists():
        try:
            read_index(target)
            return target, None
        except Exception:  # an interrupted earlier build: rebuild
            pass
    t0 = time.perf_counter()
    arrays = synthetic_arrays(n, seed)
    index = build_index(arrays, directory=None)
    del arrays
    index.strong_lines(LAMBDA)
    index.save(target)
    return target, time.perf_counter() - t0


COLD = r"""
import resource, sys, time, json
t0 = time.perf_counter()
def _peak_kb():
    # VmHWM: the peak resident set of this process image (ru_maxrss can carry the parent's
    # peak across fork + exec on Linux).
    try:
        for line in open("/proc/self/status"):
            if line.startswith("VmHWM:"):
                return int(line.split()[1])
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
import numpy as np
from refdb.match.index import read_index
from refdb.match.search import search
t_import = time.perf_counter()
sys.path.insert(0, {bench_dir!r})
from bench_search_speed import query_peaks
index = read_index({path!r})
t_load = time.perf_counter()
peaks = query_peaks(index, {row}, np.random.default_rng(1))  # imports refdb.scan (PeakList)
t_peaks = time.perf_counter()
res = search(peaks, index, top=50, profile_check=False)
t1 = time.perf_counter()
print(json.dumps({{"seconds": t1 - t0, "import_s": t_import - t0, "load_s": t_load - t_import,
                  "peaks_s": t_peaks - t_load, "search_s": t1 - t_peaks,
                  "maxrss_kb": _peak_kb(),
                  "top": res.candidates[0].entry_id if res.candidates else None}}))
"""


def measure(n: int, seed: int, queries: int, folder: Path) -> dict:
    from refdb.match.index import read_index
    from refdb.match.search import search

    path, build_s = ensure_index(n, seed, folder)
    index = read_index(path)
    rng = np.random.default_rng(seed + 1)
    rows = rng.integers(0, n, queries + 1)
    search(query_peaks(index, int(rows[0]), rng), index, top=50, profile_check=False)  # warm-up
    times, hits = [], 0
    for row in rows[1:]:
        peaks = query_peaks(index, int(row), rng)
        t0 = time.perf_counter()
        res = search(peaks, index, top=50, profile_check=False)
        times.append(time.perf_counter() - t0)
        hits += bool(res.candidates) and res.candidates[0].entry_id == int(index.entry_id[row])
    code = COLD.format(bench_dir=str(Path(__file__).resolve().parent), path=str(path), row=int(rows[1]))
    t0 = time.perf_counter()
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=False)
    cold_wall = time.perf_counter() - t0
    cold = json.loads(proc.stdout.strip().splitlines()[-1]) if proc.returncode == 0 else {"error": proc.stderr[-500:]}
    return {
        "entries": n,
        "reflections": index.n_lines,
        "build_s": build_s,
        "warm_median_ms": 1000 * statistics.median(times),
        "warm_p90_ms": 1000 * float(np.percentile(times, 90)),
        "top1_source": hits / queries,
        "cold_wall_s": cold_wall,
        "cold_inside_s": cold.get("seconds"),
        "cold_parts": {k: cold.get(k) for k in ("import_s", "load_s", "peaks_s", "search_s")},
        "cold_peak_rss_mb": cold.get("maxrss_kb", 0) / 1024 if "maxrss_kb" in cold else None,
        "cold_error": cold.get("error"),
    }


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--smoke", action="store_true", help="10k entries only (CI size)")
    ap.add_argument("--sizes", type=int, nargs="*", default=None)
    ap.add_argument("--queries", type=int, default=20)
    ap.add_argument("--seed", type=int, default=7)
    ap.add_argument("--folder", type=Path, default=Path(tempfile.gettempdir()), help="where indexes are cached")
    args = ap.parse_args(argv)
    sizes = args.sizes or ([10_000] if args.smoke else [10_000, 100_000, 1_000_000])
    rows = []
    for n in sizes:
        r = measure(n, args.seed, args.queries, args.folder)
        rows.append(r)
        build = "cached" if r["build_s"] is None else f"{r['build_s']:.1f} s"
        print(f"{n:>9,d} entries, {r['reflections']:>11,d} reflections | build {build} | warm median "
              f"{r['warm_median_ms']:.1f} ms (p90 {r['warm_p90_ms']:.1f}) | cold {r['cold_wall_s']:.2f} s "
              f"| peak RSS {r['cold_peak_rss_mb'] or float('nan'):.0f} MB | source ranked first "
              f"{100 * r['top1_source']:.0f} %", flush=True)
        parts = r["cold_parts"]
        if parts.get("search_s") is not None:
            print("  cold parts: " + ", ".join(f"{k[:-2]} {v:.2f} s" for k, v in parts.items())
                  + "  (peaks: building the query imports refdb.scan)")
        if r["cold_error"]:
            print("  cold run failed:", r["cold_error"], file=sys.stderr)
    if len(rows) > 1:
        base = rows[0]
        for r in rows[1:]:
            print(f"  ×{r['entries'] / base['entries']:.0f} entries → warm ×"
                  f"{r['warm_median_ms'] / base['warm_median_ms']:.1f}, cold ×{r['cold_wall_s'] / base['cold_wall_s']:.1f}")
    print(f"(this process: peak RSS {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f} MB)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
