"""Benchmark: one-snapshot AC estimate on IEEE 118 with a full measurement set.

Compares calibra's estimator (Hachtel augmented matrix, exact zero injections) with
(a) a plain scipy sparse Gauss-Newton loop on the normal equations (no constraints) and
(b) scipy.optimize.least_squares on the same weighted objective, on the same noisy snapshots.
Needs pypower (the test extra) for the case data and the reference power flow.

    python benchmarks/snapshot_estimator.py [--snapshots 30]
"""

from __future__ import annotations

import argparse
import time
import warnings

import numpy as np
import pandas as pd
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from pypower.api import case118, ppoption, runpf
from scipy.optimize import least_squares

import calibra  # noqa: F401  (single-threaded BLAS)
from calibra.estimation.measurement_model import MeasurementModel
from calibra.estimation.measurements import StateLayout
from calibra.estimation.wls import Estimator
from calibra.model.network import network_from_matpower


def full_points(net) -> pd.DataFrame:
    rows = []
    for bid in net.branches.index:
        for end in ("from", "to"):
            rows += [(f"{bid}:{end}:p", "p_flow", bid, end, "MW"),
                     (f"{bid}:{end}:q", "q_flow", bid, end, "Mvar")]
    for b, bus in net.buses.iterrows():
        if not bus["zero_injection"]:
            rows += [(f"{b}:p", "p_injection", b, "", "MW"),
                     (f"{b}:q", "q_injection", b, "", "Mvar")]
        rows.append((f"{b}:v", "v_magnitude", b, "", "kV"))
    pts = pd.DataFrame(rows, columns=["tag", "quantity", "element", "end", "unit"]).set_index("tag")
    pts["full_scale"] = np.where(pts["unit"] == "kV", 1.2 * net.buses["kv"].max(), 300.0)
    pts["accuracy_pct"] = 0.5
    pts["substation"] = pts["device"] = "x"
    return pts


def plain_gauss_newton(model: MeasurementModel, z: np.ndarray) -> int:
    net = model.network
    layout = StateLayout.build(net.n_bus, [net.reference_position])
    W = sp.diags(1.0 / model.sigma_pu ** 2)
    vm, va = np.ones(net.n_bus), np.zeros(net.n_bus)
    for it in range(1, 41):
        H = model.functions.jacobian(vm, va, layout)
        r = z - model.functions.evaluate(vm, va)
        G = (H.T @ W @ H).tocsc()
        lu = spla.splu(G, permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0,
                       options={"SymmetricMode": True})
        dx = lu.solve(H.T @ (W @ r))
        vm, va = layout.apply_step(vm, va, dx)
        if np.abs(dx).max() < 1e-8:
            return it
    return it


def scipy_least_squares(model: MeasurementModel, z: np.ndarray) -> None:
    net = model.network
    layout = StateLayout.build(net.n_bus, [net.reference_position])
    zero = np.zeros(net.n_bus)

    def fun(x):
        return (z - model.functions.evaluate(*layout.apply_step(zero, zero, x))) / model.sigma_pu

    def jac(x):
        H = model.functions.jacobian(*layout.apply_step(zero, zero, x), layout)
        return -(sp.diags(1.0 / model.sigma_pu) @ H)

    least_squares(fun, layout.to_state(np.ones(net.n_bus), zero), jac=jac, method="trf",
                  tr_solver="lsmr", xtol=1e-10, ftol=1e-10, gtol=1e-10)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--snapshots", type=int, default=30)
    args = ap.parse_args()
    ppc = case118()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res, _ = runpf(ppc, ppoption(VERBOSE=0, OUT_ALL=0))
    net = network_from_matpower(ppc)
    model = MeasurementModel.from_points(net, full_points(net))
    z0 = model.functions.evaluate(res["bus"][:, 7], np.deg2rad(res["bus"][:, 8]))
    rng = np.random.default_rng(118)
    Z = z0 + rng.normal(size=(args.snapshots, model.m)) * model.sigma_pu
    estimator = Estimator(model)
    estimator.estimate(Z[0])  # observability cache and imports warm

    def timed(fn, rows):
        t = time.perf_counter()
        for z in rows:
            fn(z)
        return (time.perf_counter() - t) / len(rows)

    ours = timed(lambda z: estimator.estimate(z, keep_jacobian=False), Z)
    plain = timed(lambda z: plain_gauss_newton(model, z), Z)
    lsq = timed(lambda z: scipy_least_squares(model, z), Z[: max(3, args.snapshots // 10)])
    print(f"IEEE 118, {model.m} measurements, {model.constraints.m // 2} zero-injection buses, "
          f"{args.snapshots} snapshots, flat start")
    print(f"{'method':<44}{'ms/snapshot':>12}{'vs calibra':>12}")
    for name, t in (("calibra (Hachtel, exact zero injections)", ours),
                    ("plain sparse Gauss-Newton (normal eq.)", plain),
                    ("scipy.optimize.least_squares (trf)", lsq)):
        print(f"{name:<44}{1e3 * t:>12.2f}{t / ours:>12.2f}")


if __name__ == "__main__":
    main()
