"""Benchmark: a period of snapshots through the week engine, against the usual alternatives.

Cases (built here, side by side in one process): the sample site; IEEE 118 (pypower case118)
with a full measurement set (P/Q at both branch ends, injections, voltages) and a week of
one-minute snapshots; IEEE 300 (case300); a ~2,000-bus network of 17 joined IEEE 118 copies with
2,016 five-minute snapshots. Each case reports the engine's time for estimation with normalized
residuals (Ω per snapshot), per snapshot and in all, the peak memory of the process tree during
the estimate (proportional set size of the main process and its block workers, which includes
the case's data; see process_memory.py), and the ratio to
(a) a plain per-snapshot sparse Gauss-Newton loop and (b) scipy.optimize.least_squares, both
timed on a sample of the same snapshots and scaled to the period.

    python benchmarks/week_engine.py [--cases sample 118 300 2000] [--workers 2]
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import pandas as pd
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from process_memory import PeakMemory  # benchmarks/ is on the path when run as a script
from scipy.optimize import least_squares

import calibra  # noqa: F401  (single-threaded BLAS)
from calibra.estimation.measurement_model import MeasurementModel
from calibra.estimation.measurements import StateLayout
from calibra.estimation.topology import topology_per_snapshot
from calibra.estimation.week import estimate_period
from calibra.estimation.wls import Estimator

FULL = dict(branch_end_coverage=1.0, current_share=0.0, injection_coverage=1.0,
            voltage_coverage=1.0, status_points=False)


def build(case: str):
    """(site, description) for a benchmark case."""
    from calibra.simulate.case import grid_case_from_matpower
    from calibra.simulate.metering import MeteringOptions, make_point_list
    from calibra.simulate.telemetry import TelemetryOptions, simulate_site

    if case == "sample":
        from calibra.io import load_site

        return load_site("sample_site"), "sample site, week of 1-min"
    import pypower.api as pp

    if case in ("118", "300"):
        grid = grid_case_from_matpower(getattr(pp, f"case{case}")(), name=f"case{case}")
        periods, freq = 10080, "1min"
    else:
        from calibra.simulate.synthetic import joined_copies

        grid = joined_copies(pp.case118(), 17)
        periods, freq = 2016, "5min"
    points = make_point_list(grid, options=MeteringOptions(**FULL), seed=1)
    sim = simulate_site(grid, points, start=pd.Timestamp("2026-06-01"), periods=periods,
                        freq=freq, seed=1, faults=False, outages=None,
                        options=TelemetryOptions(missing_rate=0.0005, gaps_per_point=0.0,
                                                 rtu_outage_hours=0.0))
    return sim.site, f"{grid.network.n_bus} buses, full set, {periods} x {freq}"


#: σ of zero injections taken as ordinary measurements by the plain loop (pu; a usual choice).
ZERO_INJECTION_SIGMA = 1e-3


def plain_gauss_newton(model: MeasurementModel, z: np.ndarray, status: np.ndarray) -> None:
    """Per-snapshot sparse Gauss-Newton on the normal equations, flat start; zero injections
    as ordinary measurements of small variance (the usual shortcut)."""
    net = model.network
    layout = StateLayout.build(net.n_bus, [net.reference_position])
    ok = np.isfinite(z)
    cons = model.constraints
    W = sp.diags(np.r_[np.where(ok, 1.0 / model.sigma_pu ** 2, 0.0),
                       np.full(cons.m, ZERO_INJECTION_SIGMA ** -2)])
    zz = np.r_[np.where(ok, z, 0.0), np.zeros(cons.m)]
    vm, va = np.ones(net.n_bus), np.zeros(net.n_bus)
    for _ in range(30):
        H = sp.vstack([model.functions.jacobian(vm, va, layout, status),
                       cons.jacobian(vm, va, layout, status)]).tocsr()
        r = zz - np.r_[model.functions.evaluate(vm, va, status), cons.evaluate(vm, va, status)]
        G = (H.T @ W @ H).tocsc()
        dx = spla.splu(G, permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0,
                       options={"SymmetricMode": True}).solve(H.T @ (W @ r))
        vm, va = layout.apply_step(vm, va, dx)
        if np.abs(dx).max() < 1e-8:
            return


class OutOfTime(Exception):
    """least_squares ran past its time budget."""


def scipy_lsq(model: MeasurementModel, z: np.ndarray, status: np.ndarray,
              budget: float = float("inf")) -> None:
    """scipy.optimize.least_squares (trust-region reflective, LSMR), flat start; raises
    OutOfTime after ``budget`` seconds."""
    deadline = time.perf_counter() + budget
    net = model.network
    layout = StateLayout.build(net.n_bus, [net.reference_position])
    ok = np.isfinite(z)
    zero = np.zeros(net.n_bus)
    inv = np.where(ok, 1.0 / model.sigma_pu, 0.0)
    zz = np.where(ok, z, 0.0)

    def fun(x):
        if time.perf_counter() > deadline:
            raise OutOfTime
        return (zz - model.functions.evaluate(*layout.apply_step(zero, zero, x), status)) * inv

    def jac(x):
        return -(sp.diags(inv) @ model.functions.jacobian(*layout.apply_step(zero, zero, x),
                                                          layout, status))

    least_squares(fun, layout.to_state(np.ones(net.n_bus), zero), jac=jac, method="trf",
                  tr_solver="lsmr", xtol=1e-10, ftol=1e-10, gtol=1e-10)


def run_case(case: str, workers: int | None, lsq_budget: float) -> dict:
    site, what = build(case)
    model = MeasurementModel.from_points(site.network, site.points)
    z = model.to_per_unit(site.snapshots.reindex(columns=model.tags).to_numpy(float))
    status = topology_per_snapshot(site)
    k = len(z)
    with PeakMemory(interval=0.05) as peak:
        t = time.perf_counter()
        period = estimate_period(Estimator(model), z, status, index=site.snapshots.index,
                                 workers=workers)
        engine = time.perf_counter() - t
    sample = np.linspace(0, k - 1, min(40, k)).astype(int)
    t = time.perf_counter()
    for i in sample:
        try:
            plain_gauss_newton(model, z[i], status[i])
        except RuntimeError:  # singular gain matrix: the plain loop has no observability step
            pass
    plain = (time.perf_counter() - t) / len(sample)
    # least_squares takes about a minute per snapshot on case300: fewer samples there.
    few = sample[:: max(1, len(sample) // 4)][:4] if case in ("sample", "118") else sample[:1]
    print(f"{case}: engine {engine:.1f} s, plain Gauss-Newton {1e3 * plain:.1f} ms per snapshot",
          flush=True)
    t = time.perf_counter()
    bound = ""
    try:
        for i in few:
            scipy_lsq(model, z[i], status[i], budget=lsq_budget)
    except OutOfTime:
        bound = ">"  # stopped at the budget: the figure is a lower bound
    lsq = (time.perf_counter() - t) / len(few)
    per = engine / k
    return {"case": case, "what": what, "measurements": model.m, "snapshots": k,
            "engine_s": round(engine, 1), "engine_ms_per": round(1e3 * per, 3),
            "peak_MB": round(peak.peak_mb),
            "converged_%": round(100 * float(period.outcomes["converged"].mean()), 2),
            "plain_GN_ms_per": round(1e3 * plain, 2), "vs_plain": round(plain / per, 1),
            "lsq_ms_per": f"{bound}{1e3 * lsq:.1f}", "vs_lsq": f"{bound}{lsq / per:.0f}"}


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--cases", nargs="+", default=["sample", "118", "300", "2000"])
    ap.add_argument("--workers", type=int, default=None)
    ap.add_argument("--lsq-budget", type=float, default=600.0,
                    help="seconds least_squares may take per case (then a lower bound)")
    args = ap.parse_args()
    rows = []
    for case in args.cases:
        rows.append(run_case(case, args.workers, args.lsq_budget))
        print(rows[-1], flush=True)
    print(pd.DataFrame(rows).to_string(index=False))


if __name__ == "__main__":
    main()
