"""Wrong network parameters on generated weeks: are they named, and how close is the estimate?

For each scenario the simulator draws a point list and a week of telemetry with a few meter
faults on a published network; 1–3 parameters of the site's network model are then made wrong
(25–30 % on the reactance of lines that carry flow, transformer taps one or two steps of 0.0125
off) while the telemetry stays the true network's. The week evidence is gathered as the review
gathers it, then :func:`calibra.diagnosis.model_errors.find_model_errors` searches the model.
Table: each true error named? estimate within 5 % (tap within 0.005)? verdict, the results that
match no true error, time of the search.

``--review`` runs the whole review instead (:func:`calibra.diagnosis.review.review_site`, the
meters judged again on the corrected model) and scores it per week: parameter errors named and
within tolerance, meters wrongly blamed (meter findings on points without a seeded fault, and
those of them beside a wrong parameter), recall and precision of the seeded meter faults whose
error exceeds the accuracy class, and model findings matching no error. ``--clean`` (with
``--review``): the same weeks with neither faults nor wrong parameters (every finding but an
unverifiable one is a false alarm).

    python benchmarks/parameter_errors.py [--cases case57 case118 case89pegase] [--seeds 1 2]
           [--periods 672] [--freq 15min] [--errors 2] [--review [--clean]]
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

from calibra.diagnosis.evidence import gather_evidence  # noqa: E402
from calibra.diagnosis.findings import MODEL_KINDS, findings_table  # noqa: E402
from calibra.diagnosis.model_errors import find_model_errors  # noqa: E402
from calibra.diagnosis.review import review_site  # noqa: E402
from calibra.estimation.period import prepare_period  # noqa: E402
from calibra.model.parameters import ParameterKind  # noqa: E402
from calibra.simulate.metering import make_point_list  # noqa: E402
from calibra.simulate.model_errors import ModelError, model_with_errors  # noqa: E402
from calibra.simulate.quantities import branch_end_power  # noqa: E402
from calibra.simulate.telemetry import simulate_site  # noqa: E402
from tests.diagnosis.scenarios import detectable_faults, scenario_case  # noqa: E402
from tests.diagnosis.scoring import score  # noqa: E402

#: Meter faults seeded beside the parameter errors.
METER_FAULTS = ("scale", "reversed", "offset")
TAP_TOLERANCE = 0.005
RELATIVE_TOLERANCE = 0.05


def pick_errors(case, faulted_elements: set[str], count: int, rng) -> list[ModelError]:
    """``count`` parameter errors on branches away from faulted meters: reactances of lines
    among the most loaded third (25–30 %, either sign), and for every third error a tap of a
    loaded transformer off by one or two steps of 0.0125."""
    net = case.network
    pf = case.solve()
    v = (pf.vm * np.exp(1j * pf.va_rad))[None, :]
    flow = np.abs(branch_end_power(net, v)[0][0].real)
    br = net.branches
    free = ~br.index.isin(list(faulted_elements)) & ~br["from_bus"].isin(faulted_elements) & \
        ~br["to_bus"].isin(faulted_elements)
    loaded = flow >= np.quantile(flow, 2 / 3)
    lines = list(br.index[free & loaded & (br["kind"] == "line").to_numpy()])
    trafos = list(br.index[free & (flow > np.median(flow)) & (br["kind"] == "transformer")
                           .to_numpy()])
    chosen: list[ModelError] = []
    used_buses: set[str] = set()
    for j in range(count):
        pool = trafos if (j % 3 == 2 and trafos) else lines
        pool = [b for b in pool if not {br.at[b, "from_bus"], br.at[b, "to_bus"]} & used_buses]
        if not pool:
            break
        b = str(pool[int(rng.integers(len(pool)))])
        used_buses |= {br.at[b, "from_bus"], br.at[b, "to_bus"]}
        if b in trafos and pool is not lines:
            steps = int(rng.choice([-2, -1, 1, 2]))
            chosen.append(ModelError(b, ParameterKind.TAP, offset=0.0125 * steps,
                                     detail=f"tap {steps:+d} steps"))
        else:
            share = float(rng.uniform(0.25, 0.30)) * float(rng.choice([-1, 1]))
            chosen.append(ModelError(b, ParameterKind.X, factor=1 + share,
                                     detail=f"x {100 * share:+.0f} %"))
    return chosen


def run(case_name: str, seed: int, periods: int, freq: str, n_errors: int) -> list[dict]:
    case = scenario_case(case_name)
    points = make_point_list(case, seed=seed)
    sim = simulate_site(case, points, start=pd.Timestamp("2026-05-04"), periods=periods,
                        freq=freq, seed=seed, faults=True, fault_kinds=METER_FAULTS,
                        timezone="UTC")
    faulted = set(points.loc[sim.truth["tag"], "element"].astype(str)) if len(sim.truth) \
        else set()
    errors = pick_errors(case, faulted, n_errors, np.random.default_rng(seed))
    # The same as simulate_site(..., model_errors=errors): the telemetry does not depend on it.
    model_net, truth = model_with_errors(case.network, errors)
    site = sim.site
    site.network = model_net
    t0 = time.perf_counter()
    period = prepare_period(site)
    evidence = gather_evidence(period)
    t1 = time.perf_counter()
    results = find_model_errors(evidence, period.estimator)
    t2 = time.perf_counter()
    rows = []
    matched = set()
    for e, t in zip(errors, truth.itertuples(), strict=True):
        hit = [r for r in results if r.element == e.element and r.kind == e.parameter]
        r = hit[0] if hit else None
        if r is not None:
            matched.add(id(r))
        err = abs(r.estimated_value - t.true_value) if r else np.nan
        ok = (err <= TAP_TOLERANCE if e.parameter == ParameterKind.TAP
              else err <= RELATIVE_TOLERANCE * abs(t.true_value)) if r else False
        rows.append({"case": case_name, "seed": seed, "error": f"{e.parameter} {e.element}",
                     "detail": e.detail, "true": t.true_value, "model": t.model_value,
                     "named": r is not None, "estimate": r.estimated_value if r else np.nan,
                     "within": ok, "verdict": str(r.verdict) if r else "",
                     "explained": len(r.explained) if r else 0,
                     "evidence_s": round(t1 - t0, 1), "search_s": round(t2 - t1, 1)})
    for r in results:
        if id(r) not in matched:
            rows.append({"case": case_name, "seed": seed, "error": "(none)",
                         "detail": f"false: {r.kind} {r.element}", "named": True,
                         "estimate": r.estimated_value, "verdict": str(r.verdict),
                         "search_s": round(t2 - t1, 1)})
    return rows


def _within(kind: str, estimate: float, true: float) -> bool:
    err = abs(estimate - true)
    return bool(err <= TAP_TOLERANCE if kind == ParameterKind.TAP
                else err <= RELATIVE_TOLERANCE * abs(true))


def run_review(case_name: str, seed: int, periods: int, freq: str, n_errors: int,
               clean: bool = False) -> dict:
    """One week reviewed in full: parameter errors and meter faults scored together."""
    case = scenario_case(case_name)
    points = make_point_list(case, seed=seed)
    start = pd.Timestamp("2026-05-04")
    sim = simulate_site(case, points, start=start, periods=periods, freq=freq, seed=seed,
                        faults=not clean, fault_kinds=METER_FAULTS, timezone="UTC")
    faulted = set(points.loc[sim.truth["tag"], "element"].astype(str)) if len(sim.truth) \
        else set()
    errors = [] if clean else pick_errors(case, faulted, n_errors, np.random.default_rng(seed))
    model_net, truth = model_with_errors(case.network, errors)
    site = sim.site
    site.network = model_net
    t0 = time.perf_counter()
    result = review_site(site)
    seconds = time.perf_counter() - t0
    table = findings_table(result.findings)
    model = table[table["finding"].isin(MODEL_KINDS)]
    meters = table[~table["finding"].isin(MODEL_KINDS)]
    named = within = 0
    for e, t in zip(errors, truth.itertuples(), strict=True):
        hit = model[(model["element"] == e.element) & (model["parameter"] == str(e.parameter))]
        named += bool(len(hit))
        within += bool(len(hit)) and _within(e.parameter, float(hit["estimated_value"].iloc[0]),
                                             t.true_value)
    true_keys = {(e.element, str(e.parameter)) for e in errors}
    stray = sum((r.element, r.parameter) not in true_keys for r in model.itertuples())
    s = score(meters, sim.truth, detectable_faults(sim))
    br = model_net.branches
    beside = set()
    for e in errors:
        beside |= {e.element, str(br.at[e.element, "from_bus"]), str(br.at[e.element, "to_bus"])}
    blamed_beside = [tag for tag, _ in s.false_alarms
                     if str(site.points.at[tag, "element"]) in beside]
    required = len(s.found) + len(s.missed) + len(s.wrong_kind)
    return {"case": case_name, "seed": seed, "parameter_errors": len(errors), "named": named,
            "within_tolerance": within, "model_findings_false": stray,
            "meters_blamed": len(s.false_alarms), "blamed_beside_parameter": len(blamed_beside),
            "meter_faults": required, "found": len(s.found),
            "recall": round(len(s.found) / required, 3) if required else np.nan,
            "precision": round(len(s.found) / (len(s.found) + len(s.false_alarms)
                                               + len(s.wrong_kind)), 3)
            if s.found or s.false_alarms else np.nan,
            "seconds": round(seconds, 1)}


def main_review(args) -> None:
    rows = []
    for case in args.cases:
        for seed in args.seeds:
            rows.append(run_review(case, seed, args.periods, args.freq, args.errors,
                                   args.clean))
            print(rows[-1], flush=True)
    table = pd.DataFrame(rows)
    print("\n" + table.to_string(index=False))
    found, required = int(table["found"].sum()), int(table["meter_faults"].sum())
    blamed = int(table["meters_blamed"].sum())
    print(f"\nparameter errors named {int(table['named'].sum())} of "
          f"{int(table['parameter_errors'].sum())}, within tolerance "
          f"{int(table['within_tolerance'].sum())}; model findings matching no error "
          f"{int(table['model_findings_false'].sum())}; meters wrongly blamed {blamed} "
          f"({int(table['blamed_beside_parameter'].sum())} beside a wrong parameter); meter "
          f"faults found {found} of {required}")


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cases", nargs="+", default=["case57", "case118", "case89pegase"])
    ap.add_argument("--seeds", nargs="+", type=int, default=[1, 2])
    ap.add_argument("--periods", type=int, default=672)
    ap.add_argument("--freq", default="15min")
    ap.add_argument("--errors", type=int, default=2)
    ap.add_argument("--review", action="store_true", help="run and score the whole review")
    ap.add_argument("--clean", action="store_true",
                    help="with --review: no faults and no wrong parameters")
    args = ap.parse_args(argv)
    if args.review:
        main_review(args)
        return
    rows = []
    for case in args.cases:
        for seed in args.seeds:
            rows += run(case, seed, args.periods, args.freq, args.errors)
            print(pd.DataFrame(rows).tail(args.errors + 2).to_string(index=False), flush=True)
    table = pd.DataFrame(rows)
    print("\n" + table.to_string(index=False))
    errors = table[table["error"] != "(none)"]
    print(f"\nnamed {int(errors['named'].sum())} of {len(errors)}, within tolerance "
          f"{int(errors['within'].sum())}, results matching no error "
          f"{int((table['error'] == '(none)').sum())}")


if __name__ == "__main__":
    main()
