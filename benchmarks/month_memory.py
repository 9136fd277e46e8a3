"""Benchmark: does estimating a month of one-minute snapshots need more memory than a week?

IEEE 118 (pypower case118) with a full measurement set (as in ``week_engine.py``) is simulated
for ``--days`` days of one-minute telemetry (no faults; a few missing values) and written as a
site folder (one Parquet file per day). Then, each in a fresh process so that the peaks are its
own, :func:`calibra.estimation.daywise.estimate_by_day` estimates the first week and the whole
month with normalized residuals, writing each day's results to disk (as ``calibra estimate
SITE --out DIR`` does). Printed: snapshots, wall time, and the peak memory of the process tree
(the proportional set size summed over the main process and its block workers, sampled every
50 ms; see ``process_memory.py``) and of the main process alone (VmHWM).

    python benchmarks/month_memory.py [--days 30] [--workers 2] [--repeat 3] [--keep DIR]
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import pandas as pd

import calibra  # noqa: F401  (single-threaded BLAS)

START = pd.Timestamp("2026-06-01")
FULL = dict(branch_end_coverage=1.0, current_share=0.0, injection_coverage=1.0,
            voltage_coverage=1.0, status_points=False)


def build(folder: Path, days: int) -> float:
    import pypower.api as pp

    from calibra.simulate.case import grid_case_from_matpower
    from calibra.simulate.metering import MeteringOptions, make_point_list
    from calibra.simulate.telemetry import TelemetryOptions, simulate_site
    from calibra.simulate.writer import write_site

    t0 = time.perf_counter()
    grid = grid_case_from_matpower(pp.case118(), name="case118")
    points = make_point_list(grid, options=MeteringOptions(**FULL), seed=1)
    sim = simulate_site(grid, points, start=START, periods=days * 1440, freq="1min", seed=1,
                        faults=False, outages=None, name="IEEE 118 month",
                        options=TelemetryOptions(missing_rate=0.0005, gaps_per_point=0.0,
                                                 rtu_outage_hours=0.0))
    write_site(sim.site, folder)
    return time.perf_counter() - t0


def measure(folder: Path, days: int, workers: int | None) -> dict:
    """Run in a fresh process: estimate ``days`` days day by day, results written to disk."""
    from process_memory import PeakMemory  # benchmarks/ is on the path when run as a script

    from calibra.estimation.daywise import estimate_by_day

    end = START.tz_localize("UTC") + pd.Timedelta(days=days) - pd.Timedelta(1, "ns")
    with tempfile.TemporaryDirectory() as out, PeakMemory(interval=0.05) as peak:
        t0 = time.perf_counter()
        summary = estimate_by_day(folder, None, end, out_dir=out, workers=workers)
        seconds = time.perf_counter() - t0
    with open("/proc/self/status", encoding="ascii") as f:
        hwm = next(int(line.split()[1]) / 1024 for line in f if line.startswith("VmHWM:"))
    return {"days": days, "snapshots": summary.snapshots, "converged": summary.converged,
            "seconds": round(seconds, 1), "tree_peak_pss_MB": round(peak.peak_mb),
            "main_peak_rss_MB": round(hwm)}


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--days", type=int, default=30)
    ap.add_argument("--workers", type=int, default=None)
    ap.add_argument("--keep", type=Path, default=None, help="build (or reuse) the site here")
    ap.add_argument("--repeat", type=int, default=3, help="runs of each period with workers")
    ap.add_argument("--measure", type=Path, default=None, help=argparse.SUPPRESS)
    ap.add_argument("--measure-days", type=int, default=None, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.measure is not None:
        print(json.dumps(measure(args.measure, args.measure_days, args.workers)))
        return
    with tempfile.TemporaryDirectory() as tmp:
        folder = args.keep or Path(tmp) / "site"
        if not (folder / "site.toml").exists():
            print(f"simulating {args.days} days of IEEE 118 into {folder}: "
                  f"{build(folder, args.days):.0f} s", flush=True)
        rows = []
        # The tree's peak is sampled, and the workers' peaks last a fraction of a second: it
        # varies from run to run (±5 %), so each period runs ``--repeat`` times (median). One
        # worker keeps everything in the main process, whose VmHWM is exact.
        for workers in (args.workers, 1):
            for days in (7, args.days):
                for _ in range(args.repeat if workers != 1 else 1):
                    cmd = [sys.executable, __file__, "--measure", str(folder),
                           "--measure-days", str(days)] + \
                        (["--workers", str(workers)] if workers else [])
                    out = subprocess.run(cmd, capture_output=True, text=True,
                                         check=True).stdout
                    rows.append(json.loads(out.strip().splitlines()[-1]) |
                                {"workers": workers or "default"})
                    print(rows[-1], flush=True)
        table = pd.DataFrame(rows)
        print(table.to_string(index=False))
        many = table[table["workers"] != 1].groupby("days")["tree_peak_pss_MB"].median()
        one = table[table["workers"] == 1].groupby("days")["main_peak_rss_MB"].max()
        print(f"month / week peak memory, sampled process tree (median of {args.repeat}): "
              f"{many[args.days] / many[7]:.3f}")
        print(f"month / week peak memory, one process (VmHWM, exact): "
              f"{one[args.days] / one[7]:.3f}")

if __name__ == "__main__":
    main()
