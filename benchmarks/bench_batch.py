"""Batch speed: many scans against the shared library with ``refdb.match.batch.run_batch``.

The shared open structures (``../shared/data/structures``, openly licensed COD entries) become
a temporary SQLite library. Scans of one to three common minerals (the pool of
``bench_mixtures.py``) are simulated with refdb.structure.simulate_scan (Cu Kα1 + Kα2,
10–80° 2θ in 0.02° steps, zero shift, displacement, size broadening, a sloping background,
Poisson noise), written as two-column text files stating their anode, and analysed by
``run_batch`` with two worker processes — as ``refdb batch`` does — once in search mode (peak
search and ranking) and once in unmix mode (full decomposition). Reported: wall time of each
batch (including starting the workers and reading the files), time per scan, and the time a
1,000-scan batch takes (measured when ``--scans`` is 1,000, else scaled from the measured
rate and marked so). Goal: a 1,000-scan batch in ≤ 2 minutes on a 2-core machine.

Scans are invented for this benchmark; only the structures are real.

Usage::

    python benchmarks/bench_batch.py                 # 1,000 scans, both modes
    python benchmarks/bench_batch.py --smoke         # 10 scans (CI)
    python benchmarks/bench_batch.py --scans 200 --modes unmix
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
STRUCTURES = REPO.parent / "shared" / "data" / "structures"
sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_mixtures import POOL  # noqa: E402  (the same pool of common minerals)


def build_library(folder: Path) -> tuple[str, dict]:
    from refdb.errors import RefdbError
    from refdb.library import open_library
    from refdb.match.index import load_index
    from refdb.structure import reference_from_cif

    url = str(folder / "batch.sqlite")
    refs = {}
    with open_library(url, create=True) as lib:
        for p in sorted(STRUCTURES.glob("*.cif")):
            try:
                ref = reference_from_cif(p)
            except RefdbError:
                continue
            lib.add(ref)
            if p.stem in POOL:
                refs[p.stem] = ref
        load_index(lib)  # built and cached once, as refdb batch does before starting workers
    return url, refs


def write_scans(refs: dict, n: int, folder: Path, seed: int) -> list[Path]:
    from refdb.radiation import radiation_for
    from refdb.structure import simulate_scan

    rng = np.random.default_rng(seed)
    rad = radiation_for("Cu")
    grid = np.arange(10.0, 80.0 + 1e-9, 0.02)
    keys = sorted(refs)
    paths = []
    for i in range(n):
        k = int(rng.integers(1, 4))
        chosen = [refs[keys[j]] for j in rng.choice(len(keys), size=k, replace=False)]
        w = rng.dirichlet(np.full(k, 2.0))
        scan = simulate_scan(
            list(zip(chosen, w, strict=True)), rad, grid, zero_shift=float(rng.uniform(-0.05, 0.05)),
            displacement=float(rng.uniform(-0.05, 0.05)), crystallite_size_nm=float(rng.uniform(80, 300)),
            background=(float(rng.uniform(80, 300)), float(rng.uniform(-1.0, 0.3))),
            counts=float(rng.uniform(5_000, 30_000)), seed=int(rng.integers(1 << 31)),
        )
        path = folder / f"scan{i:04d}.xy"
        with path.open("w", encoding="utf-8") as fh:
            fh.write(f"# invented scan {i} for refdb's batch benchmark\n# anode: Cu\n")
            np.savetxt(fh, np.column_stack([scan.two_theta, scan.counts]), fmt="%.3f")
        paths.append(path)
    return paths


def run(n: int, modes: list[str], seed: int, workers: int) -> list[dict]:
    from refdb.match.batch import BatchOptions, run_batch

    out = []
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        t0 = time.perf_counter()
        url, refs = build_library(folder)
        t_lib = time.perf_counter() - t0
        t0 = time.perf_counter()
        paths = write_scans(refs, n, folder, seed)
        t_scans = time.perf_counter() - t0
        print(f"library built in {t_lib:.1f} s; {n} scans simulated in {t_scans:.1f} s")
        for mode in modes:
            t0 = time.perf_counter()
            outcomes = run_batch(paths, BatchOptions(library_url=url, mode=mode), workers=workers)
            wall = time.perf_counter() - t0
            failed = sum(not o.ok for o in outcomes)
            out.append({"mode": mode, "scans": n, "wall_s": wall, "per_scan_s": wall / n, "failed": failed})
    return out


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--smoke", action="store_true", help="10 scans (CI size)")
    ap.add_argument("--scans", type=int, default=1000)
    ap.add_argument("--modes", default="search,unmix", help="comma-separated: search, unmix")
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--seed", type=int, default=2026)
    args = ap.parse_args(argv)
    if not (STRUCTURES / "MANIFEST.tsv").is_file():
        print("the shared structures (../shared/data/structures) are not beside this checkout", file=sys.stderr)
        return 2
    n = 10 if args.smoke else args.scans
    for r in run(n, [m.strip() for m in args.modes.split(",") if m.strip()], args.seed, args.workers):
        per_1000 = 1000 * r["per_scan_s"]
        how = "measured" if r["scans"] == 1000 else f"scaled from {r['scans']} scans"
        print(f"{r['mode']:6s}: {r['scans']} scans in {r['wall_s']:.1f} s with {args.workers} workers "
              f"({1000 * r['per_scan_s']:.0f} ms per scan, {r['failed']} failed); 1,000 scans: "
              f"{per_1000 / 60:.1f} min ({how}; goal ≤ 2 min)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
