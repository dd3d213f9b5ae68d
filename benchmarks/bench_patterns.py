"""Speed of powder patterns from structures: refdb side by side with pymatgen's XRDCalculator.

For each CIF of the shared COD set (../shared/data/structures beside the repository) both
programs compute the Cu Kα1 pattern for 2θ ≤ 90° from an already parsed structure (parsing
is timed separately); refdb also for its default d_min = 0.7 Å (the library's setting). The
medians per structure and their ratio are printed, with the time for the whole set.

    python benchmarks/bench_patterns.py            # every file both programs read
    python benchmarks/bench_patterns.py --smoke    # five files (CI)
    python benchmarks/bench_patterns.py --no-pymatgen

Each time is the best of three calls. The machine the numbers were taken on is shared and
noisy: compare the two columns of one run, not runs of different days.
"""

from __future__ import annotations

import argparse
import gc
import statistics
import sys
import time
import warnings
from pathlib import Path

import numpy as np

from refdb.errors import InputError
from refdb.radiation import radiation_for
from refdb.structure import compute_reflections, read_crystal, stick_pattern

CU_KA1 = 1.54059292
STRUCTURES = Path(__file__).resolve().parents[1].parent / "shared" / "data" / "structures"
SMOKE_FILES = ("1000041.cif", "1000007.cif", "9008877.cif", "1010914.cif", "9009083.cif")


def _timed(func, *args, repeat: int = 3, **kwargs):
    """Best wall time of ``repeat`` calls (the usual guard against a busy machine), with the
    garbage collector held off during each call so neither program pays for the other's
    garbage; returns (seconds, result of the last call)."""
    best, result = float("inf"), None
    for _ in range(repeat):
        gc.disable()
        try:
            start = time.perf_counter()
            result = func(*args, **kwargs)
            best = min(best, time.perf_counter() - start)
        finally:
            gc.enable()
    return best, result


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--smoke", action="store_true", help="five structures only (CI)")
    parser.add_argument("--no-pymatgen", action="store_true", help="time refdb alone")
    parser.add_argument("--structures", type=Path, default=STRUCTURES, help="folder of CIFs")
    args = parser.parse_args(argv)
    if not args.structures.is_dir():
        print(f"no structure folder at {args.structures}", file=sys.stderr)
        return 1
    files = [args.structures / n for n in SMOKE_FILES] if args.smoke else sorted(args.structures.glob("*.cif"))

    calculator = None
    if not args.no_pymatgen:
        try:
            from pymatgen.analysis.diffraction.xrd import XRDCalculator
            from pymatgen.io.cif import CifParser

            calculator = XRDCalculator(wavelength=CU_KA1)
        except ImportError:
            print("pymatgen not installed: timing refdb alone", file=sys.stderr)

    rad = radiation_for(wavelength=CU_KA1)
    d_min_90 = CU_KA1 / (2 * np.sin(np.radians(45.0)))
    t_read, t_ours, t_ours_full, t_theirs, t_parse_theirs = [], [], [], [], []
    failed = {"refdb": 0, "pymatgen": 0}
    wall = time.perf_counter()
    for path in files:
        try:
            dt, crystal = _timed(read_crystal, path)
        except InputError:
            failed["refdb"] += 1
            continue
        theirs = None
        if calculator is not None:
            try:
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    dp, structure = _timed(lambda p: CifParser(str(p)).parse_structures(primitive=False)[0], path)
                    dtheirs, _ = _timed(calculator.get_pattern, structure, two_theta_range=(0, 90))
                theirs = (dp, dtheirs)
            except Exception:  # noqa: BLE001 - a file pymatgen cannot read is left out of both columns
                failed["pymatgen"] += 1
                continue
        d1, lines = _timed(compute_reflections, crystal, d_min=d_min_90 * 0.999)
        d2, _ = _timed(stick_pattern, lines, rad, two_theta_range=(0.01, 90.0))
        d3, _ = _timed(compute_reflections, crystal)
        t_read.append(dt)
        t_ours.append(d1 + d2)
        t_ours_full.append(d3)
        if theirs:
            t_parse_theirs.append(theirs[0])
            t_theirs.append(theirs[1])
    wall = time.perf_counter() - wall

    def ms(values):
        return f"{1e3 * statistics.median(values):9.2f}" if values else "        –"

    print(f"structures timed: {len(t_ours)} (refdb could not read {failed['refdb']}, "
          f"pymatgen could not read {failed['pymatgen']}); wall time {wall:.1f} s")
    print("median per structure, ms        refdb   pymatgen")
    print(f"  read CIF                    {ms(t_read)}  {ms(t_parse_theirs)}")
    print(f"  pattern, Cu Kα1, 2θ ≤ 90°   {ms(t_ours)}  {ms(t_theirs)}")
    print(f"  reflections, d ≥ 0.7 Å      {ms(t_ours_full)}          –")
    if t_theirs:
        ratio = statistics.median(t_theirs) / statistics.median(t_ours)
        per = statistics.median(np.array(t_theirs) / np.array(t_ours))
        print(f"pymatgen / refdb: ratio of medians {ratio:.1f}×, median of per-structure ratios {per:.1f}×")
    print(f"refdb total for the set (read + d ≥ 0.7 Å): {sum(t_read) + sum(t_ours_full):.1f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
