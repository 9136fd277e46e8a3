"""The whole review at utility scale, as a user runs it: ``calibra review`` on a site folder.

A published network (pandapower's PEGASE models, or a pypower IEEE case) gets a simulated point
list with field-like sparse metering (each branch end metered with chance ``--coverage`` on its
own, status points without device or class) and a week of snapshots with a random fault mix;
the site is written as a folder, then ``calibra review SITE --out DIR`` runs in a fresh process.
Reported: wall time of the command, peak memory of its process tree (proportional set size,
benchmarks/process_memory.py, sampled from outside), and how the findings score against the
simulated truth.

    python benchmarks/review_scale.py --case case1354pegase [--periods 672 --freq 15min]
           [--coverage 0.55] [--seed 1] [--keep /tmp/site]
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from process_memory import tree_pss_mb  # noqa: E402  (benchmarks/ is on the path as a script)

from calibra.simulate.metering import MeteringOptions  # noqa: E402
from calibra.simulate.writer import write_site  # noqa: E402
from tests.diagnosis.scenarios import detectable_faults, generated_scenario  # noqa: E402
from tests.diagnosis.scoring import score  # noqa: E402


def _run_measured(cmd: list[str]) -> tuple[float, float, int]:
    """Wall seconds, peak tree PSS (MB) and exit code of a command."""
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    peak = 0.0
    stop = threading.Event()

    def sample() -> None:
        nonlocal peak
        while not stop.is_set():
            t = time.perf_counter()
            peak = max(peak, tree_pss_mb(proc.pid))
            stop.wait(max(0.05, 20 * (time.perf_counter() - t)))

    thread = threading.Thread(target=sample, daemon=True)
    thread.start()
    _, err = proc.communicate()
    stop.set()
    thread.join()
    if proc.returncode:
        print(err[-2000:], file=sys.stderr)
    return time.perf_counter() - t0, peak, proc.returncode


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--case", default="case1354pegase")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--periods", type=int, default=672)
    ap.add_argument("--freq", default="15min")
    ap.add_argument("--coverage", type=float, default=0.55)
    ap.add_argument("--keep", default=None, help="write the site folder here and keep it")
    args = ap.parse_args()
    metering = MeteringOptions(branch_end_coverage=args.coverage, independent_ends=True,
                               bare_status_points=True)
    t = time.perf_counter()
    sim = generated_scenario(args.case, args.seed, args.periods, args.freq, metering=metering)
    made = time.perf_counter() - t
    pts = sim.site.points
    analog = int((pts["quantity"] != "branch_status").sum())
    with tempfile.TemporaryDirectory() as tmp:
        site = Path(args.keep) if args.keep else Path(tmp) / "site"
        write_site(sim.site, site, sim.truth)
        out = Path(tmp) / "review"
        wall, peak, rc = _run_measured([sys.executable, "-m", "calibra", "review", str(site),
                                        "--out", str(out)])
        found = pd.read_csv(out / "findings.csv") if (out / "findings.csv").exists() else None
        s = score(found, sim.truth, detectable_faults(sim)) if found is not None else None
    print({"case": args.case, "buses": len(sim.site.network.buses), "points": len(pts),
           "analog": analog, "snapshots": len(sim.site.snapshots), "simulated_s": round(made),
           "review_s": round(wall, 1), "peak_mb": round(peak), "exit": rc,
           "found": len(s.found) if s else None, "missed": s.missed if s else None,
           "wrong": s.wrong_kind if s else None, "false": s.false_alarms if s else None})


if __name__ == "__main__":
    main()
