"""Diagnosis quality on generated scenarios: published networks, random fault mixes, seeds.

For each scenario the simulator draws a point list and a random mix of faults, the review runs,
and the findings are compared with the ground truth: found (right kind), missed, wrong kind,
false alarms (unverifiable critical meters are not false alarms), factor and onset errors.
Faults whose error stays below the meter's accuracy class are reported as undetectable and not
required.

    python benchmarks/diagnosis_scenarios.py [--cases case57 case118] [--seeds 1 2 3]
           [--periods 2016] [--freq 5min] [--coverage 0.55 --sparse] [--bare-status]
           [--deadband 0.3 --bits 12 [--stated]] [--clean] [--rtu-lag MINUTES]
           [--moving-taps N [--untelemetered] [--tap-fault KIND]]

``--cases`` takes pypower's IEEE cases and pandapower's published networks
(``tests/published.py``: case89pegase, iceland, GBreducednetwork, case1354pegase, …).
``--coverage`` is the chance that a branch end is metered; ``--sparse`` meters each end on its
own (branches without any flow meter, unobservable parts); ``--clean`` runs the same weeks with
no fault (every finding is a false alarm); ``--stated`` writes the deadband and resolution the
readings were stored with into the point list (otherwise the review infers them from the data);
``--rtu-lag`` makes one random RTU's clock run that many minutes late (negative: early), scored
as a ``time_offset`` truth row whose offset error is printed against the snapshot interval.
``--moving-taps`` gives that many metered transformers a moving on-load tap changer, with a
tap-position point each (``--untelemetered``: none, the model holds the ratio) and
``--tap-fault`` on the first point (tap_offset, tap_inverted, tap_frozen, tap_step_size); tap
truth is scored apart from the meters (columns tap_*), and the meter columns leave it out.
Peak memory: proportional set size of the process
tree (benchmarks/process_memory.py).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import pandas as pd

import calibra  # noqa: F401

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from process_memory import PeakMemory  # noqa: E402  (benchmarks/ is on the path as a script)

from calibra.diagnosis.findings import TAP_KINDS, findings_table  # noqa: E402
from calibra.diagnosis.review import review_site  # noqa: E402
from calibra.simulate.metering import MeteringOptions  # noqa: E402
from calibra.simulate.tap_motion import OltcOptions  # noqa: E402
from calibra.simulate.telemetry import TelemetryOptions  # noqa: E402
from tests.diagnosis.scenarios import detectable_faults, generated_scenario  # noqa: E402
from tests.diagnosis.scoring import score  # noqa: E402


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--cases", nargs="+", default=["case57", "case118"])
    ap.add_argument("--seeds", nargs="+", type=int, default=[1, 2, 3])
    ap.add_argument("--periods", type=int, default=2016)
    ap.add_argument("--freq", default="5min")
    ap.add_argument("--coverage", type=float, default=None,
                    help="chance that a branch end is metered (default: the simulator's)")
    ap.add_argument("--sparse", action="store_true", help="meter branch ends independently")
    ap.add_argument("--bare-status", action="store_true",
                    help="status points without device, full scale or accuracy class")
    ap.add_argument("--deadband", type=float, default=0.0, help="report by exception, %% FS")
    ap.add_argument("--bits", type=int, default=0, help="converter resolution (0: none)")
    ap.add_argument("--stated", action="store_true",
                    help="the point list states each point's deadband and resolution")
    ap.add_argument("--clean", action="store_true", help="no faults: count false alarms")
    ap.add_argument("--rtu-lag", type=float, default=0.0, metavar="MINUTES",
                    help="one random RTU's clock this many minutes late (0: none)")
    ap.add_argument("--moving-taps", type=int, default=0, metavar="N",
                    help="transformers with a moving on-load tap changer (0: none)")
    ap.add_argument("--untelemetered", action="store_true",
                    help="moving taps without tap-position points")
    ap.add_argument("--tap-fault", default="", help="fault of the first tap-position point")
    args = ap.parse_args()
    oltc = OltcOptions(transformers=args.moving_taps, telemetered=not args.untelemetered,
                       fault=args.tap_fault) if args.moving_taps else None
    metering = MeteringOptions(independent_ends=args.sparse,
                               bare_status_points=args.bare_status)
    if args.coverage is not None:
        metering = MeteringOptions(branch_end_coverage=args.coverage,
                                   independent_ends=args.sparse,
                                   bare_status_points=args.bare_status)
    telemetry = TelemetryOptions(deadband_pct=args.deadband, resolution_bits=args.bits,
                                 state_storage=args.stated, rtu_lag_minutes=args.rtu_lag,
                                 oltc=oltc)
    rows = []
    for case in args.cases:
        for seed in args.seeds:
            sim = generated_scenario(case, seed, args.periods, args.freq,
                                     faults=not args.clean, metering=metering,
                                     telemetry=telemetry)
            t = time.perf_counter()
            with PeakMemory(0.05) as mem:
                res = review_site(sim.site)
            dt = time.perf_counter() - t
            table = findings_table(res.findings)
            is_tap = sim.truth["kind"].isin(TAP_KINDS)
            taps = score(table[table.finding.isin(TAP_KINDS)], sim.truth[is_tap])
            s = score(table[~table.finding.isin(TAP_KINDS)], sim.truth[~is_tap],
                      detectable_faults(sim))
            rows.append({"case": case, "seed": seed, "points": len(sim.site.points),
                         "faults": int((~is_tap).sum()) - (sim.rtu_lag is not None),
                         "undetectable": len(s.undetectable),
                         "found": len(s.found) - len(s.clock_errors_s),
                         "missed": len(s.missed), "wrong": len(s.wrong_kind),
                         "false": len(s.false_alarms),
                         "tap_truth": int(is_tap.sum()), "tap_found": len(taps.found),
                         "tap_wrong": len(taps.wrong_kind), "tap_false": len(taps.false_alarms),
                         "unverifiable": int((table.finding == "unverifiable").sum()),
                         "rtu_lag": sim.rtu_lag[0] if sim.rtu_lag else "",
                         "clock_error_s": next(iter(s.clock_errors_s.values()), ""),
                         "clock_findings": int((table.finding == "time_offset").sum()),
                         "seconds": round(dt, 1), "peak_mb": round(mem.peak_mb)})
            print(rows[-1], flush=True)
            for item in s.missed:
                print("   missed", item, sim.truth.loc[sim.truth.tag == item, "kind"].tolist())
            for item in s.wrong_kind + s.false_alarms + taps.wrong_kind + taps.false_alarms:
                print("   ", item)
    table = pd.DataFrame(rows)
    print(table.to_string())
    found, missed = table["found"].sum(), table["missed"].sum()
    wrong, false = table["wrong"].sum(), table["false"].sum()
    print(f"meters: recall {found / max(found + missed + wrong, 1):.3f}, precision "
          f"{found / max(found + wrong + false, 1):.3f}; taps: found "
          f"{table['tap_found'].sum()} of {table['tap_truth'].sum()}, wrong kind "
          f"{table['tap_wrong'].sum()}, false {table['tap_false'].sum()}")


if __name__ == "__main__":
    main()
