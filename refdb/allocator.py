"""Keep freed memory in the process heap instead of handing it back to the kernel.

A decomposition makes and drops many temporary numpy arrays of a few megabytes (profiles on
the scan grid, vote tables of the search). glibc's allocator serves blocks above its mmap
threshold with fresh pages from the kernel and returns the heap's free top above its trim
threshold (mallopt(3): the thresholds start at 128 kB and adapt, the mmap one up to 32 MB on
64-bit systems), so the same memory is faulted in and zeroed again and again — about 10,000
page faults per decomposed scan of the batch benchmark. Raising both thresholds lets the
heap reuse it. Measured side by side on 2026-12-02 (DEVELOPERS.md, "Judge speed side by
side"): 60 decompositions in one process 9–18 % less wall time and the page faults gone; the
300-scan batch of two workers 3–9 % less wall time, its kernel time 9.5–10.5 s → 1.2–1.4 s.

This changes a process-wide setting, so only code that owns its process calls
:func:`keep_freed_memory`: the command line at start-up and the batch's worker processes.
The cost is memory: up to :data:`TRIM_THRESHOLD` of freed heap stays with the process until
it exits.
"""

from __future__ import annotations

import ctypes
import os
import sys

#: Blocks at least this large are still mapped from the kernel one by one (bytes).
MMAP_THRESHOLD = 64 * 1024 * 1024
#: Free memory at the top of the heap beyond this is returned to the kernel (bytes).
TRIM_THRESHOLD = 128 * 1024 * 1024
#: glibc's mallopt parameter numbers (<malloc.h>).
_M_TRIM_THRESHOLD, _M_MMAP_THRESHOLD = -1, -3
#: Environment variables with which a user sets the thresholds themselves (glibc reads them
#: at start-up); when either is set, it is left alone.
USER_SETTINGS = ("MALLOC_MMAP_THRESHOLD_", "MALLOC_TRIM_THRESHOLD_")


def keep_freed_memory() -> bool:
    """Raise glibc's mmap and trim thresholds for this process (module docstring).

    Returns
    -------
    bool
        True when both were set; False on other platforms or C libraries, or when the user
        set either threshold in the environment.
    """
    if not sys.platform.startswith("linux") or any(v in os.environ for v in USER_SETTINGS):
        return False
    try:
        # The interpreter's own symbols include its C library's: no search for the library
        # (ctypes.util.find_library runs ldconfig, milliseconds at every start of a worker).
        mallopt = ctypes.CDLL(None).mallopt
    except (OSError, AttributeError):
        return False
    mallopt.argtypes = [ctypes.c_int, ctypes.c_int]
    mallopt.restype = ctypes.c_int
    # mmap first: setting it also stops glibc from adapting either threshold on its own.
    return mallopt(_M_MMAP_THRESHOLD, MMAP_THRESHOLD) == 1 and mallopt(_M_TRIM_THRESHOLD, TRIM_THRESHOLD) == 1


__all__ = ["MMAP_THRESHOLD", "TRIM_THRESHOLD", "keep_freed_memory"]
