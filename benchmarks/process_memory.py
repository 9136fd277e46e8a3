"""Peak memory of this process and its worker processes, sampled while a job runs.

The block engine's workers are forked processes that share the parent's pages until they write
them, and write their results into memory shared with the parent; adding up resident sizes
would count those pages twice. The proportional set size (PSS, Linux ``smaps_rollup``) splits
every shared page among the processes that map it, so the sum over the process tree is the
memory the job really holds. Sampled on a thread every ``interval`` seconds, or less often
when a sample is slow.
"""

from __future__ import annotations

import os
import threading
import time


def _pss_kb(pid: int) -> int:
    try:
        with open(f"/proc/{pid}/smaps_rollup", encoding="ascii") as f:
            for line in f:
                if line.startswith("Pss:"):
                    return int(line.split()[1])
    except OSError:
        pass
    return 0


def _children(pid: int) -> list[int]:
    out = []
    for entry in os.listdir("/proc"):
        if not entry.isdigit():
            continue
        try:
            with open(f"/proc/{entry}/stat", encoding="ascii") as f:
                fields = f.read().rsplit(")", 1)[1].split()
        except OSError:
            continue
        if int(fields[1]) == pid:
            out.append(int(entry))
    return out


def tree_pss_mb(pid: int | None = None) -> float:
    """PSS of a process and its children (one level: the engine's workers), in MB."""
    pid = os.getpid() if pid is None else pid
    return (_pss_kb(pid) + sum(_pss_kb(c) for c in _children(pid))) / 1024


class PeakMemory:
    """Context manager: ``peak_mb`` is the largest tree PSS seen while inside."""

    def __init__(self, interval: float = 0.02):
        self.interval = interval
        self.peak_mb = 0.0
        self._stop = threading.Event()

    def _run(self) -> None:
        while not self._stop.is_set():
            t = time.perf_counter()
            self.peak_mb = max(self.peak_mb, tree_pss_mb())
            # A sample walks the page tables of every process of the tree (tens of ms for a
            # few GB) and holds up their page faults meanwhile: sampling at most 1/20 of the
            # time keeps the job measured close to the job unmeasured.
            self._stop.wait(max(self.interval, 20 * (time.perf_counter() - t)))

    def __enter__(self) -> PeakMemory:
        self.peak_mb = tree_pss_mb()
        self._thread = threading.Thread(target=self._run, daemon=True)
        self._thread.start()
        return self

    def __exit__(self, *exc) -> None:
        self._stop.set()
        self._thread.join()
        self.peak_mb = max(self.peak_mb, tree_pss_mb())
