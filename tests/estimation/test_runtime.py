"""Process settings of the block engine (calibra.estimation.runtime).

glibc's adaptive malloc thresholds give freed large arrays back to the system and fault them in
again page by page; Dask's nanny even sets ``MALLOC_TRIM_THRESHOLD_``, which turns the adaptive
thresholds off (every array above 128 KiB is then mapped and unmapped). ``tune_allocator`` keeps
freed memory for reuse. References: glibc mallopt(3) and mallinfo2(3) (``hblks`` counts chunks
served by mmap; the adaptive mmap ceiling is 32 MiB on 64-bit), getrusage(2) (``ru_minflt``:
page faults served without I/O).
"""

from __future__ import annotations

import os
import subprocess
import sys

import pytest

PROGRAM = """
import ctypes, resource
import numpy as np
from calibra.estimation.runtime import tune_allocator

class MallInfo2(ctypes.Structure):
    _fields_ = [(n, ctypes.c_size_t) for n in (
        "arena", "ordblks", "smblks", "hblks", "hblkhd", "usmblks", "fsmblks", "uordblks",
        "fordblks", "keepcost")]

libc = ctypes.CDLL("libc.so.6")
libc.mallinfo2.restype = MallInfo2

def mapped():
    # 16 MiB: above a fixed 128 KiB threshold, below the adaptive 32 MiB ceiling.
    base = libc.mallinfo2().hblks
    a = np.empty(1 << 21)
    a[:] = 1.0
    return libc.mallinfo2().hblks - base

def faults():
    # The block iteration's pattern: several 3-4 MB temporaries made and freed, repeatedly.
    before = resource.getrusage(resource.RUSAGE_SELF).ru_minflt
    for _ in range(50):
        a = np.ones((1078, 360)); b = a * 2.0 + 1.0; c = np.sqrt(b) * a
        del a, b, c
    return resource.getrusage(resource.RUSAGE_SELF).ru_minflt - before

faults()
print(mapped(), faults(), tune_allocator(), faults(), mapped())
"""


def _run(env: dict) -> list[str]:
    return subprocess.run([sys.executable, "-c", PROGRAM], env=env, capture_output=True,
                          text=True, timeout=120, check=True).stdout.split()


def _has_mallinfo2() -> bool:
    import ctypes

    try:
        return hasattr(ctypes.CDLL("libc.so.6"), "mallinfo2")
    except OSError:
        return False


glibc = pytest.mark.skipif(not sys.platform.startswith("linux") or not _has_mallinfo2(),
                           reason="glibc 2.33 or later")


@glibc
def test_tuned_process_keeps_large_arrays_on_the_heap_under_a_dask_nanny():
    before, _, changed, _, after = _run(dict(os.environ, MALLOC_TRIM_THRESHOLD_="65536"))
    assert (before, changed, after) == ("1", "True", "0")


@glibc
def test_tuned_process_stops_faulting_freed_memory_back_in():
    env = {k: v for k, v in os.environ.items() if not k.startswith("MALLOC_")}
    _, untuned, changed, tuned, after = _run(env)
    assert changed == "True" and after == "0"
    # 50 rounds of ~10 MB: without tuning thousands of faults (pages come back each round);
    # tuned, the heap keeps them (measured here: about 2,200 vs 0).
    assert int(tuned) * 10 < int(untuned)


def test_fork_map_gives_the_serial_results_and_falls_back_off_the_main_thread():
    """Work spread over forked workers returns what a plain loop returns, in order; from a
    thread other than the main one (the desktop application's worker) it runs in place."""
    import threading

    import numpy as np

    from calibra.estimation.runtime import can_fork, fork_map

    data = np.random.default_rng(1).normal(size=(7, 50))

    def work(i):
        return float(np.linalg.norm(data[i])), i

    serial = [work(i) for i in range(7)]
    assert fork_map(work, range(7), workers=2) == serial
    from_thread = {}

    def in_thread():
        from_thread["forkable"] = can_fork(2)
        from_thread["result"] = fork_map(work, range(7), workers=2)

    t = threading.Thread(target=in_thread)
    t.start()
    t.join()
    assert from_thread == {"forkable": False, "result": serial}
