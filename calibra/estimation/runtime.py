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
import multiprocessing
import os
import sys
import threading
from collections.abc import Callable, Iterable, Iterator

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


def default_workers() -> int:
    """Worker processes for parallel work: the machine's cores, at most 4."""
    return max(1, min(4, os.cpu_count() or 1))


def can_fork(workers: int) -> bool:
    """Whether work may go to forked worker processes: more than one worker, called from the
    main thread (not the desktop application's worker thread), not from inside a worker, and
    fork available on this platform."""
    if workers <= 1 or threading.current_thread() is not threading.main_thread():
        return False
    if multiprocessing.current_process().daemon:
        return False
    return "fork" in multiprocessing.get_all_start_methods()


def fork_pool(workers: int):
    """A fork-based process pool (check :func:`can_fork` first); the workers inherit the
    parent's memory as it is now, and are set up by :func:`worker_setup`."""
    return multiprocessing.get_context("fork").Pool(workers, initializer=worker_setup)


_TASK: dict = {}  # inherited by forked workers of fork_imap: the function and the items


def _call(i: int):
    return _TASK["fn"](_TASK["items"][i])


def fork_imap(fn: Callable, items: Iterable, workers: int, *, ordered: bool = True,
              chunksize: int = 1) -> Iterator:
    """``fn(x)`` for each of ``items``, on ``workers`` forked processes where that is possible
    (see :func:`can_fork`; in the order of the items, or as they finish unless ``ordered``),
    else in this process in order. ``fn`` and the items are inherited by the workers, not
    sent; only the results travel back (they must pickle). Same results either way."""
    items = list(items)
    if not can_fork(workers):
        yield from map(fn, items)
        return
    _TASK.update(fn=fn, items=items)
    pool = None
    try:
        pool = fork_pool(workers)  # forked now: inherits _TASK
        each = pool.imap if ordered else pool.imap_unordered
        yield from each(_call, range(len(items)), chunksize)
    finally:
        _TASK.clear()
        if pool is not None:
            pool.terminate()
            pool.join()


def fork_map(fn: Callable, items: Iterable, workers: int | None = None) -> list:
    """``[fn(x) for x in items]`` through :func:`fork_imap` (at most one worker per item)."""
    items = list(items)
    workers = min(default_workers() if workers is None else workers, len(items))
    return list(fork_imap(fn, items, workers,
                          chunksize=max(1, len(items) // (4 * max(workers, 1)))))
