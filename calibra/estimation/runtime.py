"""Process settings that the block engine's numerical kernels depend on for their speed.

Two measured effects (DEVELOPERS.md, "Speed"):

* Memory returned to the operating system after every large temporary array is faulted back in,
  page by page, at the next allocation. With glibc's default dynamic thresholds the block
  iteration spent about three quarters of its time in page faults (IEEE 118, 360 snapshots per
  block: 39 ms per h(x)+gradient evaluation, 9 ms with the thresholds below). Dask's nanny
  starts workers with ``MALLOC_TRIM_THRESHOLD_`` set, which turns the adaptive thresholds off
  altogether (one day of IEEE 118 took 2.5-3x longer: 800,000 page faults instead of 36,000);
  the settings here apply whatever the environment says.
* A multi-threaded BLAS in each of several worker processes oversubscribes the cores (two
  workers with two BLAS threads each on 2 cores: 22 s instead of 6 s for a week of IEEE 118).
"""

from __future__ import annotations

import ctypes
import ctypes.util
import sys

# glibc mallopt parameters (malloc.h).
_M_TRIM_THRESHOLD = -1
_M_MMAP_THRESHOLD = -3
#: Arrays up to this size come from the heap instead of fresh mappings (glibc's upper limit on
#: 64-bit systems is 32 MB).
MMAP_THRESHOLD = 32 * 1024 * 1024
#: Free memory at the top of the heap kept for reuse rather than returned.
TRIM_THRESHOLD = 256 * 1024 * 1024

_tuned = False


def tune_allocator() -> bool:
    """Keep freed memory for reuse (glibc only; elsewhere nothing happens). Returns whether the
    settings were applied. Process-wide and idempotent; inherited by forked workers."""
    global _tuned
    if _tuned:
        return True
    if not sys.platform.startswith("linux"):
        return False
    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6")
        mallopt = libc.mallopt
    except (OSError, AttributeError):
        return False  # not glibc (e.g. musl)
    mallopt.argtypes = (ctypes.c_int, ctypes.c_int)
    mallopt.restype = ctypes.c_int
    _tuned = bool(mallopt(_M_MMAP_THRESHOLD, MMAP_THRESHOLD)) and \
        bool(mallopt(_M_TRIM_THRESHOLD, TRIM_THRESHOLD))
    return _tuned


def single_threaded_blas() -> None:
    """Hold BLAS/OpenMP libraries already loaded in this process to one thread."""
    from threadpoolctl import threadpool_limits

    threadpool_limits(1)


def worker_setup() -> None:
    """Initializer of block worker processes."""
    tune_allocator()
    single_threaded_blas()
