"""Workers started by Dask's nanny have ``MALLOC_TRIM_THRESHOLD_`` set, which turns off glibc's
adaptive malloc thresholds: every large temporary array is then mapped and unmapped again
(measured: one day of IEEE 118 took 2.5-3× longer). ``tune_allocator`` restores thresholds in
the adaptive range. Reference: glibc mallopt(3) and mallinfo2(3) (setting M_TRIM_THRESHOLD
disables the dynamic mmap threshold, fixed at 128 KiB; the dynamic ceiling is 32 MiB on 64-bit);
``hblks`` counts the chunks glibc serves by mmap."""

from __future__ import annotations

import os
import subprocess
import sys

import pytest

pytest.importorskip("distributed")

PROGRAM = """
import ctypes
import numpy as np
from calibra.cluster.worker import tune_allocator

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

print(mapped(), tune_allocator(), mapped())
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


@pytest.mark.skipif(not sys.platform.startswith("linux") or not _has_mallinfo2(),
                    reason="glibc 2.33 or later")
def test_tuned_worker_keeps_large_arrays_on_the_heap():
    before, changed, after = _run(dict(os.environ, MALLOC_TRIM_THRESHOLD_="65536"))
    assert (before, changed, after) == ("1", "True", "0")


@pytest.mark.skipif(not sys.platform.startswith("linux") or not _has_mallinfo2(),
                    reason="glibc 2.33 or later")
def test_left_alone_without_the_variable():
    env = {k: v for k, v in os.environ.items() if k != "MALLOC_TRIM_THRESHOLD_"}
    assert _run(env)[1] == "False"
