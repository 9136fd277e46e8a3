"""Numerical observability of one snapshot's measurement set.

The test uses the decoupled structural model, as is usual in the trade: active-power
measurements (flows, injections, zero-injection constraints) against bus angles with branch
susceptances ``1/x``, and reactive-power and voltage measurements against voltage magnitudes.
Angles are observable within an island up to its own reference; magnitudes need at least one
voltage measurement per island. A Cholesky factorization of the structural gain matrix answers
the common, fully observable case quickly; otherwise the null space (SVD) names the
unobservable buses and the observable islands.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg as la
import scipy.sparse as sp

from calibra.estimation.measurements import (
    I_MAG,
    P_FLOW,
    P_INJ,
    Q_FLOW,
    Q_INJ,
    V_MAG,
    MeasurementFunctions,
)

_PIVOT_RATIO = 1e-10
_NULL_TOL = 1e-8


@dataclass(frozen=True)
class Observability:
    """Outcome of the observability test for one snapshot.

    ``island`` labels each bus with its observable island (0, 1, …) or -1 when the bus's state
    cannot be estimated; ``references`` holds one angle-reference bus position per island.
    """

    observable: bool
    island: np.ndarray
    references: np.ndarray
    reason: str

    @property
    def estimated_buses(self) -> np.ndarray:
        return self.island >= 0

    @property
    def n_islands(self) -> int:
        return int(self.island.max() + 1) if (self.island >= 0).any() else 0


def _structural_rows(funcs: MeasurementFunctions, used: np.ndarray, in_service: np.ndarray,
                     active: bool) -> sp.csr_matrix:
    """Structural Jacobian rows of the P-θ (active) or Q-V (reactive) decoupled model."""
    net = funcs.network
    adm = net.branch_admittances(np.ones(net.n_branch, bool))
    x = net.branches["x"].to_numpy(float)
    bser = np.where(in_service, 1.0 / np.maximum(np.abs(x), 1e-6), 0.0)
    n = net.n_bus
    flow_codes = (P_FLOW,) if active else (Q_FLOW,)
    inj_codes = (P_INJ,) if active else (Q_INJ,)
    rows, cols, vals = [], [], []
    idx = np.flatnonzero(used)
    code = funcs.code[idx]
    elem = funcs.element[idx]
    # flows: b (θf − θt) for P, b (Vf − Vt) for Q.
    fl = np.isin(code, flow_codes)
    e = elem[fl]
    r = np.flatnonzero(fl)
    rows += [r, r]
    cols += [adm.f[e], adm.t[e]]
    vals += [bser[e], -bser[e]]
    # injections: Laplacian row of the bus.
    inj = np.flatnonzero(np.isin(code, inj_codes))
    if inj.size:
        lap = _laplacian(adm.f, adm.t, bser, n)
        sub = lap[elem[inj]].tocoo()
        rows.append(inj[sub.row])
        cols.append(sub.col)
        vals.append(sub.data)
    if not active:
        vv = np.flatnonzero(code == V_MAG)
        rows.append(vv)
        cols.append(elem[vv])
        vals.append(np.full(vv.size, float(np.median(bser[bser > 0])) if (bser > 0).any() else 1.0))
    return sp.csr_matrix(
        (np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
        shape=(len(idx), n),
    )


def _laplacian(f, t, b, n) -> sp.csr_matrix:
    a = sp.csr_matrix((np.r_[b, b], (np.r_[f, t], np.r_[t, f])), shape=(n, n))
    return (sp.diags(np.asarray(a.sum(axis=1)).ravel()) - a).tocsr()


def _full_rank(g: np.ndarray) -> bool:
    scale = np.maximum(np.diag(g).max(initial=0.0), 1e-30)
    try:
        c, _ = la.cho_factor(g, lower=True, check_finite=False)
    except la.LinAlgError:
        return False
    return bool(np.diag(c).min() ** 2 > _PIVOT_RATIO * scale)


def _null_space(a: np.ndarray, n: int) -> np.ndarray:
    if a.shape[0] == 0:
        return np.eye(n)
    _, s, vt = la.svd(a, full_matrices=True, check_finite=False)
    tol = _NULL_TOL * (s.max() if s.size else 1.0)
    rank = int((s > tol).sum())
    return vt[rank:].T


def _group_rows(null: np.ndarray) -> np.ndarray:
    """Label buses whose rows of the null-space basis are equal (same island)."""
    if null.shape[1] == 0:
        return np.zeros(null.shape[0], np.int64)
    scale = np.abs(null).max()
    key = np.round(null / scale, 6)
    _, labels = np.unique(key, axis=0, return_inverse=True)
    return labels.ravel()


class StructuralModel:
    """The decoupled structural rows of every measurement and constraint for one topology,
    built once and reused for every availability pattern."""

    def __init__(self, funcs: MeasurementFunctions, constraints: MeasurementFunctions | None,
                 in_service: np.ndarray):
        everything = np.ones(funcs.m, bool)
        self.a_p = _structural_rows(funcs, everything, in_service, True)
        self.a_q = _structural_rows(funcs, everything, in_service, False)
        self.is_current = funcs.code == I_MAG
        if constraints is not None and constraints.m:
            all_c = np.ones(constraints.m, bool)
            self.c_p = _structural_rows(constraints, all_c, in_service, True)
            self.c_q = _structural_rows(constraints, all_c, in_service, False)
        else:
            self.c_p = self.c_q = sp.csr_matrix((0, funcs.network.n_bus))
        self.n = funcs.network.n_bus

    def rows(self, available: np.ndarray) -> tuple[sp.csr_matrix, sp.csr_matrix]:
        used = np.asarray(available, bool) & ~self.is_current
        w = sp.diags(used.astype(float))
        return (sp.vstack([w @ self.a_p, self.c_p]).tocsr(),
                sp.vstack([w @ self.a_q, self.c_q]).tocsr())


def analyse_observability(
    funcs: MeasurementFunctions,
    available: np.ndarray,
    constraints: MeasurementFunctions | None,
    in_service: np.ndarray,
    reference: int,
    structure: StructuralModel | None = None,
) -> Observability:
    """Observability of the measurement rows marked ``available`` (plus all constraints).

    ``funcs`` holds the measurements; ``constraints`` the zero-injection equalities, which count
    as exact measurements. Current magnitudes carry no sign and are left out of the test.
    ``structure`` (built for this topology) saves rebuilding the structural rows.
    """
    n = funcs.network.n_bus
    st = structure or StructuralModel(funcs, constraints, in_service)
    sa_p, sa_q = st.rows(available)
    gp = (sa_p.T @ sa_p).toarray()
    gp[reference, reference] += max(gp.max(initial=0.0), 1.0)
    gq = (sa_q.T @ sa_q).toarray()
    if _full_rank(gp) and _full_rank(gq):
        return Observability(True, np.zeros(n, np.int64), np.array([reference]), "observable")

    a_p = sa_p.toarray()
    a_q = sa_q.toarray()
    null_p = _null_space(a_p, n)
    groups = _group_rows(null_p)
    null_q = _null_space(a_q, n)
    v_known = (np.abs(null_q) <= _NULL_TOL * 10).all(axis=1) if null_q.size else np.ones(n, bool)
    # A bus whose angle is tied to no other bus carries no active-power information.
    sizes = np.bincount(groups)
    estimable = v_known & (sizes[groups] > 1)
    island = np.full(n, -1, np.int64)
    refs = []
    for g in np.unique(groups[estimable]):
        members = np.flatnonzero((groups == g) & estimable)
        island[members] = len(refs)
        refs.append(reference if reference in members else int(members[0]))
    n_lost = int((~estimable).sum())
    reason = (
        f"not fully observable: {len(refs)} observable island(s), "
        f"{n_lost} bus(es) cannot be estimated"
    )
    return Observability(False, island, np.asarray(refs, np.int64), reason)
