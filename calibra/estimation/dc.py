"""Linear (DC) weighted-least-squares estimate of bus angles from active-power measurements.

Used for fast screening of active-power telemetry and as a warm start for the AC estimator.
Model: flat voltage magnitudes, lossless branches, ``P_ft = (θf − θt − φ) / (x · tap)``.
Zero-injection buses are held exactly (equality-constrained least squares, solved as one sparse
symmetric system).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from calibra.estimation.measurements import P_FLOW, P_INJ, MeasurementFunctions
from calibra.estimation.model import MeasurementModel


@dataclass
class DcEstimate:
    va: np.ndarray  # radians; NaN when the angle is not determined
    residual: np.ndarray  # per unit, NaN for rows not used (non-active or missing)
    used: np.ndarray
    objective: float
    solved: bool
    reason: str


def _dc_rows(funcs: MeasurementFunctions, rows: np.ndarray, status: np.ndarray):
    """Linear rows a·θ + a0 for active-power quantities ``rows`` of ``funcs``."""
    net = funcs.network
    br = net.branches
    adm = net.branch_admittances(np.ones(net.n_branch, bool))
    tap = br["tap"].fillna(1.0).to_numpy(float)
    tap = np.where(tap == 0, 1.0, tap)
    b = np.where(status, 1.0 / (br["x"].to_numpy(float) * tap), 0.0)
    shift = np.deg2rad(br["shift_deg"].fillna(0.0).to_numpy(float))
    n, nl = net.n_bus, net.n_branch
    lines = np.arange(nl)
    # Branch flow from→to as rows over bus angles, and the injection incidence.
    pf = sp.csr_matrix((np.r_[b, -b], (np.r_[lines, lines], np.r_[adm.f, adm.t])), shape=(nl, n))
    pf_const = -b * shift
    ones = np.ones(nl)
    inc = sp.csr_matrix((np.r_[ones, -ones], (np.r_[adm.f, adm.t], np.r_[lines, lines])),
                        shape=(n, nl))
    code, elem, end = funcs.code[rows], funcs.element[rows], funcs.end[rows]
    # Flow rows: ± the branch row by end; injection rows: incidence times the branch rows.
    sign = np.where(code == P_FLOW, np.where(end == 0, 1.0, -1.0), 0.0)
    flow_part = sp.diags(sign) @ pf[np.where(code == P_FLOW, elem, 0)]
    inj_sel = sp.csr_matrix(
        (np.ones(int((code == P_INJ).sum())), (np.flatnonzero(code == P_INJ), elem[code == P_INJ])),
        shape=(rows.size, n),
    )
    inj_part = inj_sel @ inc
    a = (flow_part + inj_part @ pf).tocsr()
    consts = sign * pf_const[np.where(code == P_FLOW, elem, 0)] + inj_part @ pf_const
    return a, consts


def estimate_dc(model: MeasurementModel, z: np.ndarray, available: np.ndarray | None = None,
                in_service: np.ndarray | None = None) -> DcEstimate:
    """DC estimate of angles (reference bus at zero) from the active-power rows of ``z`` (pu)."""
    net = model.network
    status = net.default_in_service() if in_service is None else np.asarray(in_service, bool)
    avail = np.isfinite(z) if available is None else np.asarray(available, bool) & np.isfinite(z)
    active = np.isin(model.code, (P_FLOW, P_INJ)) & avail
    rows = np.flatnonzero(active)
    n = net.n_bus
    A, a0 = _dc_rows(model.functions, rows, status)
    cons = model.constraints
    crow = np.flatnonzero(cons.code == P_INJ)
    Cm, c0 = _dc_rows(cons, crow, status)
    keep = np.ones(n, bool)
    keep[net.reference_position] = False
    A = A[:, keep]
    Cm = Cm[:, keep]
    w = 1.0 / model.sigma_pu[rows] ** 2
    G = (A.T @ sp.diags(w) @ A).tocsc()
    rhs = A.T @ (w * (z[rows] - a0))
    nc = Cm.shape[0]
    K = sp.bmat([[G, Cm.T], [Cm, sp.csr_matrix((nc, nc))]], format="csc") if nc else G
    va = np.full(n, np.nan)
    residual = np.full(model.m, np.nan)
    try:
        sol = spla.splu(K, permc_spec="MMD_AT_PLUS_A").solve(np.r_[rhs, -c0])
    except RuntimeError as exc:
        return DcEstimate(va, residual, active, np.nan, False, f"not observable for DC: {exc}")
    theta = np.zeros(n)
    theta[keep] = sol[: keep.sum()]
    if not np.all(np.isfinite(theta)):
        return DcEstimate(va, residual, active, np.nan, False, "not observable for DC")
    residual[rows] = z[rows] - (A @ theta[keep] + a0)
    objective = float(np.sum(w * residual[rows] ** 2))
    return DcEstimate(theta, residual, active, objective, True, "solved")
