"""Benchmark: a month of one-minute snapshots of IEEE 118 (pypower case118) estimated on this
machine and on a local Dask cluster.

The month (43,200 snapshots by default) is simulated without faults (the simulator's point
list, a planned line outage, missing values and RTU outages as usual) and written as a site
folder in a temporary directory; the client and the workers read that folder. Timed, each on
the full-resolution estimate of the whole month with normalized-residual statistics (what the
review's final pass asks for) and on one screening pass (every 10th snapshot):

- LocalEngine in one process, and with two forked block workers (the default here);
- ClusterEngine on a LocalCluster of ``--workers`` single-threaded worker processes on
  127.0.0.1: the first call includes every worker reading the site folder, the second runs on
  the workers' cached period.

The cluster's estimates are checked to be equal to the bit to the local ones.

    python benchmarks/cluster_month.py [--days 30] [--workers 2] [--keep DIR]
"""

from __future__ import annotations

import argparse
import os
import resource
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

import calibra  # noqa: F401  (single-threaded BLAS)
from calibra.cluster import ClusterEngine, start_local_cluster
from calibra.estimation.engine import LocalEngine
from calibra.estimation.week import SolverSettings
from calibra.io import load_site
from calibra.review_period import select_period

START = pd.Timestamp("2026-06-01")
TIMEZONE = "Europe/Oslo"
#: (label, every n-th snapshot, largest block, tolerance) as calibra.diagnosis.evidence asks.
PASSES = [("full resolution", 1, 360, 1e-8), ("screening (every 10th)", 10, 36, 1e-6)]


def build(folder: Path, days: int, seed: int) -> float:
    """Simulate ``days`` of one-minute telemetry of IEEE 118 into ``folder``; seconds taken."""
    import pypower.api as pp

    from calibra.simulate.case import grid_case_from_matpower
    from calibra.simulate.metering import make_point_list
    from calibra.simulate.telemetry import simulate_site
    from calibra.simulate.writer import write_site

    t0 = time.perf_counter()
    grid = grid_case_from_matpower(pp.case118(), name="case118")
    points = make_point_list(grid, seed=seed)
    sim = simulate_site(grid, points, start=START, periods=days * 1440, timezone=TIMEZONE,
                        seed=seed, faults=False, name="IEEE 118 month")
    write_site(sim.site, folder)
    return time.perf_counter() - t0


def _timed(fn):
    t0 = time.perf_counter()
    out = fn()
    return out, time.perf_counter() - t0


def _peak_mb() -> float:
    """Peak resident memory of the calling process in MB: VmHWM on Linux (ru_maxrss would
    carry over the peak of the process that spawned a worker), else ru_maxrss."""
    try:
        with open("/proc/self/status", encoding="ascii") as status:
            for line in status:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) / 1024
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def _memory_mb() -> tuple[float, float]:
    """(resident now, peak) of the calling process in MB."""
    import psutil  # a dependency of dask.distributed

    return psutil.Process().memory_info().rss / 2**20, _peak_mb()


def _same(a, b) -> bool:
    arrays = all(np.array_equal(getattr(a, n), getattr(b, n), equal_nan=True)
                 for n in ("vm", "va", "residual", "omega"))
    return arrays and a.outcomes.equals(b.outcomes)


def run(folder: Path, workers: int) -> None:
    from distributed import Client

    (site, t_load) = _timed(lambda: load_site(folder))
    period, t_prep = _timed(lambda: select_period(site))
    k, m = period.z.shape
    print(f"site: {len(site.network.buses)} buses, {m} analog points, {k:,} snapshots "
          f"({site.snapshots.index[0]:%Y-%m-%d} to {site.snapshots.index[-1]:%Y-%m-%d} UTC); "
          f"load {t_load:.1f} s, per unit and topology {t_prep:.1f} s")
    none = np.zeros(m, bool)
    rows = {label: np.arange(0, k, step) for label, step, _, _ in PASSES}
    table: list[tuple[str, str, float, int]] = []
    reference = {}
    for n_proc in (1, 2):
        engine = LocalEngine(workers=n_proc)
        for label, _, block, tol in PASSES:
            result, sec = _timed(lambda e=engine, r=rows[label], b=block, t=tol:
                                 e.estimate(period, r, none,
                                            settings=SolverSettings(b, t, 0.99)))
            reference.setdefault(label, result)
            table.append((label, f"local, {n_proc} process{'es' * (n_proc > 1)}", sec,
                          len(rows[label])))
    del period

    cluster = start_local_cluster(workers)
    try:
        with Client(cluster) as client:
            client.wait_for_workers(workers, timeout=120)
            engine = ClusterEngine(client)
            period, t_init = _timed(lambda: select_period(site))
            print(f"cluster: {workers} worker processes on 127.0.0.1; client set-up "
                  f"{t_init:.1f} s")
            for attempt in ("first call, workers read the site", "second call"):
                for label, _, block, tol in PASSES:
                    result, sec = _timed(lambda r=rows[label], b=block, t=tol:
                                         engine.estimate(period, r, none,
                                                         settings=SolverSettings(b, t, 0.99)))
                    same = _same(reference[label], result)
                    table.append((label, f"cluster of {workers}, {attempt}"
                                  + ("" if same else " (DIFFERENT RESULTS)"), sec,
                                  len(rows[label])))
            worker_memory = client.run(_memory_mb)
    finally:
        cluster.close()

    print("\n| estimate | where | seconds | snapshots/s |\n|---|---|---|---|")
    for label, where, sec, n in table:
        print(f"| {label} | {where} | {sec:.1f} | {n / sec:,.0f} |")
    workers_mb = ", ".join(f"{now:,.0f} (peak {peak:,.0f})"
                           for now, peak in worker_memory.values())
    print(f"\nresident memory: this process peak {_peak_mb():,.0f} MB; workers after the runs "
          f"{workers_mb} MB; load average at the end "
          f"{os.getloadavg()[0]:.1f} on {os.cpu_count()} cores (other work slows every row)")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--days", type=int, default=30)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--keep", type=Path, default=None,
                        help="write the site here (and reuse it if it already exists)")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory(prefix="calibra-month-") as tmp:
        folder = args.keep or Path(tmp) / "site"
        if not (folder / "site.toml").exists():
            sec = build(folder, args.days, args.seed)
            print(f"built {args.days} days of one-minute IEEE 118 telemetry in {sec:.0f} s")
        run(folder, args.workers)


if __name__ == "__main__":
    main()
