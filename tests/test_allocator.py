"""refdb.allocator: freed arrays stay in the heap instead of being faulted in again.

What is checked is the kernel's own count of minor page faults (getrusage(2), ru_minflt) in a
fresh interpreter that makes and drops the same 16 MB and 40 MB arrays many times. With glibc's default
thresholds (mallopt(3): the mmap threshold adapts only up to 32 MB, and the heap top is
trimmed beyond twice it) the pages are handed back and faulted in again; once the
thresholds are raised they are reused.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys

import pytest

from refdb.allocator import keep_freed_memory

_CHILD = """
import json, resource, sys
import numpy as np
from refdb.allocator import keep_freed_memory

def faults():
    before = resource.getrusage(resource.RUSAGE_SELF).ru_minflt
    for _ in range(40):
        a = np.ones(2_000_000)          # 16 MB, written so every page is touched
        b = np.ones(5_000_000)          # 40 MB: above the largest adaptive mmap threshold
        del a, b
    return resource.getrusage(resource.RUSAGE_SELF).ru_minflt - before

faults()                                # numpy's own first-use faults out of the way
plain = faults()
kept = keep_freed_memory()
faults()                                # the heap grows to hold both arrays: faulted in once
after = faults()
print(json.dumps({"plain": plain, "kept": kept, "after": after}))
"""


def _glibc() -> bool:
    import platform

    return sys.platform.startswith("linux") and platform.libc_ver()[0] == "glibc"


@pytest.mark.skipif(not _glibc(), reason="the thresholds are glibc's")
def test_raised_thresholds_stop_refaulting_freed_arrays():
    env = {k: v for k, v in os.environ.items() if not k.startswith("MALLOC_")}
    out = subprocess.run([sys.executable, "-c", _CHILD], capture_output=True, text=True, env=env, check=True)
    r = json.loads(out.stdout)
    assert r["kept"] is True
    # 40 rounds of 56 MB: with the defaults the 40 MB array at least is mapped and faulted in
    # afresh every round (how many faults that is depends on the page size: numpy asks for
    # huge pages on large arrays, 2 MB each, so ≥ 20 per round, 800 in all); afterwards the
    # pages are reused (measured after one warm-up loop, in which the heap grows to hold both
    # arrays: 568 faults here and on the CI machine, a one-off). A factor of 10 leaves room
    # for the interpreter's own faults.
    assert r["plain"] > 800
    assert r["after"] * 10 < r["plain"]


def test_a_threshold_set_by_the_user_is_left_alone(monkeypatch):
    monkeypatch.setenv("MALLOC_MMAP_THRESHOLD_", "131072")
    assert keep_freed_memory() is False
