"""Generated review scenarios on published networks (test helper)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from calibra.diagnosis.findings import TAP_KINDS
from calibra.simulate.case import grid_case_from_matpower
from calibra.simulate.metering import MeteringOptions, make_point_list
from calibra.simulate.telemetry import SimulationResult, TelemetryOptions, simulate_site
from tests.published import PUBLISHED, published_grid_case


def scenario_case(case_name: str):
    """A published network as a simulator case: a pypower IEEE case (``case57``…) or one of
    pandapower's networks (:data:`tests.published.PUBLISHED`)."""
    if case_name in PUBLISHED:
        return published_grid_case(case_name)
    import pypower.api as pp

    return grid_case_from_matpower(getattr(pp, case_name)(), name=case_name)


def generated_scenario(case_name: str, seed: int, periods: int = 2016, freq: str = "5min",
                       faults=True, metering: MeteringOptions | None = None,
                       telemetry: TelemetryOptions | None = None,
                       model_errors=()) -> SimulationResult:
    """A published network with a simulated point list (``metering``), period (``telemetry``)
    and a random fault mix drawn from ``seed``; ``model_errors``: wrong parameters of the site's
    network model (the telemetry comes from the true one)."""
    case = scenario_case(case_name)
    points = make_point_list(case, options=metering, seed=seed)
    return simulate_site(case, points, start=pd.Timestamp("2026-05-04"), periods=periods,
                         freq=freq, seed=seed, faults=faults, timezone="UTC", options=telemetry,
                         model_errors=model_errors)


def reversed_device_scenario(case_name: str, seed: int, periods: int = 576):
    """A scenario whose only fault is the most loaded power device wired reversed (P and Q);
    returns (simulation, device, its power tags)."""
    from calibra.simulate.faults import FaultSpec

    clean = generated_scenario(case_name, seed, periods=periods, faults=False)
    pts = clean.site.points
    power = pts[pts["quantity"].isin(["p_flow", "q_flow"])]
    loaded = clean.true_values[power.index].abs().median()
    device = str(power.loc[loaded.idxmax(), "device"])
    tags = tuple(power.index[power["device"] == device])
    sim = generated_scenario(case_name, seed, periods=periods,
                             faults=[FaultSpec("reversed", tags, factor=-1.0)])
    return sim, device, tags


def detectable_faults(sim: SimulationResult) -> set[str]:
    """Fault points whose error exceeds the point's accuracy-class limit for a good part of the
    period (what a review can be asked to find; common practice, no source)."""
    pts = sim.site.points
    out = set()
    for r in sim.truth.itertuples():
        if r.kind in TAP_KINDS:
            # A seeded tap fault or a moving untelemetered tap moves the ratio by steps of
            # 1.25 %, far beyond any meter's class: always to be found.
            out.add(r.tag)
            continue
        if r.kind == "time_offset":
            # An RTU clock error: what a review is asked to find whenever one is seeded
            # (its size is checked against the snapshot interval by the tests).
            out.add(r.tag)
            continue
        if r.tag not in sim.true_values:
            continue
        true = sim.true_values[r.tag].to_numpy(float)
        meas = sim.site.snapshots[r.tag].to_numpy(float)
        limit = float(pts.at[r.tag, "accuracy_pct"]) / 100 * float(pts.at[r.tag, "full_scale"])
        ok = np.isfinite(true) & np.isfinite(meas)
        err = np.abs(meas[ok] - true[ok])
        if r.kind == "noisy":
            out.add(r.tag) if r.noise_factor >= 3 else None
        elif r.kind in ("drift", "stuck"):
            if np.mean(err > 1.5 * limit) > 0.1:
                out.add(r.tag)
        elif np.median(err) > 1.5 * limit:
            out.add(r.tag)
    return out
