"""Diagnosis quality on generated scenarios: published networks, random fault mixes, seeds.

For each scenario the simulator draws a point list and a random mix of faults, the review runs,
and the findings are compared with the ground truth: found (right kind), missed, wrong kind,
false alarms (unverifiable critical meters are not false alarms), factor and onset errors.
Faults whose error stays below the meter's accuracy class are reported as undetectable and not
required.

    python benchmarks/diagnosis_scenarios.py [--cases case57 case118] [--seeds 1 2 3]
           [--periods 2016] [--freq 5min]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import pandas as pd

import calibra  # noqa: F401

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from calibra.diagnosis.findings import findings_table  # noqa: E402
from calibra.diagnosis.review import review_site  # noqa: E402
from tests.diagnosis.scenarios import detectable_faults, generated_scenario  # noqa: E402
from tests.diagnosis.scoring import score  # noqa: E402


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--cases", nargs="+", default=["case57", "case118"])
    ap.add_argument("--seeds", nargs="+", type=int, default=[1, 2, 3])
    ap.add_argument("--periods", type=int, default=2016)
    ap.add_argument("--freq", default="5min")
    args = ap.parse_args()
    rows = []
    for case in args.cases:
        for seed in args.seeds:
            sim = generated_scenario(case, seed, args.periods, args.freq)
            t = time.perf_counter()
            res = review_site(sim.site)
            dt = time.perf_counter() - t
            s = score(findings_table(res.findings), sim.truth, detectable_faults(sim))
            rows.append({"case": case, "seed": seed, "faults": len(sim.truth),
                         "undetectable": len(s.undetectable), "found": len(s.found),
                         "missed": len(s.missed), "wrong": len(s.wrong_kind),
                         "false": len(s.false_alarms), "seconds": round(dt, 1)})
            print(rows[-1], flush=True)
            for item in s.missed:
                print("   missed", item, sim.truth.loc[sim.truth.tag == item, "kind"].tolist())
            for item in s.wrong_kind + s.false_alarms:
                print("   ", item)
    print(pd.DataFrame(rows).to_string())


if __name__ == "__main__":
    main()
