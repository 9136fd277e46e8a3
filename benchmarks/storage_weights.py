"""Should a point's deadband and resolution enter its weight in the estimator?

On a report-by-exception week (``--deadband`` % of full scale, ``--bits`` converter) the held
readings lag the true values by up to the deadband: a per-snapshot error of σ = deadband/√3
(and step/√12 for the rounding) beside the class σ. This benchmark estimates the same weeks
twice, with the class σ alone (the point list leaves deadband and resolution empty) and with
σ² = class σ² + deadband²/3 + step²/12 (the point list states both: calibra's weights then,
``model.points.measurement_sigma``), and compares what the estimator gives:

- the share of converged snapshots that pass the chi-square test (a test of the weights:
  with the right σ about ``confidence`` of them should pass),
- the RMS error of the estimated voltage magnitudes (pu) and angles (mrad) against the
  simulation's true states,
- the points the review's screening sets aside and how many of those are healthy.

    python benchmarks/storage_weights.py [--cases case57 case118] [--seeds 1 2]
           [--periods 1008] [--deadband 0.3] [--bits 12]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

import calibra  # noqa: F401

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from calibra.diagnosis.evidence import EvidenceSettings, gather_evidence  # noqa: E402
from calibra.estimation.period import prepare_period  # noqa: E402
from calibra.estimation.week import estimate_period  # noqa: E402
from calibra.model.points import REPORTING_COLUMNS  # noqa: E402
from calibra.model.site import Site  # noqa: E402
from calibra.simulate.telemetry import TelemetryOptions  # noqa: E402
from tests.diagnosis.scenarios import generated_scenario  # noqa: E402


def without_stated_storage(site: Site) -> Site:
    """The site with the deadband and resolution left to the data: class σ in the weights."""
    pts = site.points.copy()
    pts[REPORTING_COLUMNS] = np.nan
    return Site(site.path, site.name, site.timezone, site.network, pts, site.snapshots)


def state_errors(site: Site, sim) -> dict:
    period = prepare_period(site)
    res = estimate_period(period.estimator, period.z, period.in_service, period.index)
    out = res.outcomes
    conv = out["converged"].astype(bool).to_numpy()
    ref = site.network.reference_position
    vm_true = sim.true_vm.to_numpy(float)
    va_true = sim.true_va.to_numpy(float)
    va_true = va_true - va_true[:, [ref]]
    va = res.va.astype(float) - res.va.astype(float)[:, [ref]]
    dv = (res.vm.astype(float) - vm_true)[conv]
    da = (va - va_true)[conv]
    return {"chi2_pass_pct": round(100 * float(out.loc[conv, "chi2_passed"].mean()), 1),
            "vm_rms_pu": float(np.sqrt(np.nanmean(dv ** 2))),
            "va_rms_mrad": 1000 * float(np.sqrt(np.nanmean(da ** 2)))}


def screening(site: Site, faulty: set[str]) -> dict:
    ev = gather_evidence(prepare_period(site), EvidenceSettings())
    aside = {str(t) for t, a in zip(ev.model.tags, ev.set_aside, strict=True) if a}
    return {"set_aside": len(aside), "set_aside_healthy": len(aside - faulty)}


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--cases", nargs="+", default=["case57", "case118"])
    ap.add_argument("--seeds", nargs="+", type=int, default=[1, 2])
    ap.add_argument("--periods", type=int, default=1008)
    ap.add_argument("--deadband", type=float, default=0.3)
    ap.add_argument("--bits", type=int, default=12)
    args = ap.parse_args()
    telemetry = TelemetryOptions(deadband_pct=args.deadband, resolution_bits=args.bits,
                                 state_storage=True)
    rows = []
    for case in args.cases:
        for seed in args.seeds:
            for faults in (False, True):
                sim = generated_scenario(case, seed, args.periods, faults=faults,
                                         telemetry=telemetry)
                faulty = set(sim.truth["tag"]) if faults else set()
                for weights, site in (("class", without_stated_storage(sim.site)),
                                      ("class+storage", sim.site)):
                    t = time.perf_counter()
                    row = {"case": case, "seed": seed, "faults": faults, "weights": weights,
                           **state_errors(site, sim), **screening(site, faulty),
                           "seconds": 0.0}
                    row["seconds"] = round(time.perf_counter() - t, 1)
                    rows.append(row)
                    print(row, flush=True)
    table = pd.DataFrame(rows)
    print(table.to_string())


if __name__ == "__main__":
    main()
