"""Every benchmark runs at its small size, so the benchmarks keep working.

Only that they run and print their result lines is checked here: speed and accuracy goals are
judged by running the benchmarks by hand (see README, Performance), never by timed assertions.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

BENCHMARKS = Path(__file__).resolve().parents[1] / "benchmarks"
SHARED = Path(__file__).resolve().parents[2] / "shared" / "data" / "structures"
NEEDS_SHARED = {"bench_identification.py", "bench_mixtures.py", "bench_patterns.py", "bench_batch.py"}

SCRIPTS = sorted(p.name for p in BENCHMARKS.glob("bench_*.py"))


def test_there_are_benchmarks():
    assert {"bench_patterns.py", "bench_peaks.py", "bench_search_speed.py", "bench_identification.py",
            "bench_mixtures.py", "bench_batch.py"} <= set(SCRIPTS)


@pytest.mark.parametrize("script", SCRIPTS)
def test_smoke_run(script, tmp_path):
    if script in NEEDS_SHARED and not SHARED.is_dir():
        pytest.skip("needs the shared structure set (../shared/data/structures)")
    proc = subprocess.run(
        [sys.executable, str(BENCHMARKS / script), "--smoke"],
        capture_output=True, text=True, timeout=900, cwd=tmp_path,
    )
    assert proc.returncode == 0, proc.stderr[-2000:]
    assert proc.stdout.strip(), "the benchmark printed no result"
