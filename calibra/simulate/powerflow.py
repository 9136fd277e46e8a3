"""Newton-Raphson AC power flow in polar form, for one snapshot or many at once.

The simulator needs the true state of every snapshot of a week. :func:`solve_power_flow`
solves one operating point with a sparse Jacobian; :func:`solve_power_flow_batch` solves many
operating points of one topology together: their Jacobians are stacked into one block-diagonal
sparse matrix, so a Newton step for a thousand snapshots is a single sparse factorization
instead of a thousand Python-level solves. :func:`solve_snapshots` groups snapshots by
topology and calls the batch solver per group.

Bus roles: the slack bus (default: the network's reference bus) holds |V| and angle; PV buses
hold |V| and net P; every other bus is PQ. Injections are net (generation minus load) in MW
and Mvar; bus shunts belong to the network (Ybus), not to the injections.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.sparse.linalg import splu

from calibra.model.network import Network

#: Default convergence tolerance: largest P or Q mismatch in per unit.
TOLERANCE_PU = 1e-10


@dataclass
class PowerFlowResult:
    """Outcome of one power flow: voltages (pu, rad), convergence, largest mismatch (pu)."""

    vm: np.ndarray
    va_rad: np.ndarray
    converged: bool
    iterations: int
    mismatch: float


@dataclass
class BatchPowerFlowResult:
    """Outcome of many power flows: arrays with one row per snapshot."""

    vm: np.ndarray  # (K, n)
    va_rad: np.ndarray  # (K, n)
    converged: np.ndarray  # (K,) bool
    iterations: np.ndarray  # (K,) int
    mismatch: np.ndarray  # (K,) largest |mismatch| in pu


class _Pattern:
    """Index bookkeeping of the reduced Jacobian for one topology and set of bus roles."""

    def __init__(self, ybus: sp.csr_matrix, slack: int, pv: np.ndarray):
        n = ybus.shape[0]
        is_pv = np.zeros(n, bool)
        is_pv[pv] = True
        is_pv[slack] = False
        self.pvpq = np.array([i for i in range(n) if i != slack], dtype=np.int64)
        self.pq = np.flatnonzero(~is_pv & (np.arange(n) != slack))
        self.n_va, self.n_vm = len(self.pvpq), len(self.pq)
        self.dim = self.n_va + self.n_vm
        # Ybus pattern with an explicit diagonal, so every bus has its (i, i) entry.
        pattern = ((ybus != 0).astype(np.int8) + sp.eye(n, dtype=np.int8, format="csr")).tocoo()
        self.ri, self.ci = pattern.row.astype(np.int64), pattern.col.astype(np.int64)
        self.y = np.asarray(ybus[self.ri, self.ci]).ravel()
        self.diag = self.ri == self.ci
        row_p = np.full(n, -1)
        row_p[self.pvpq] = np.arange(self.n_va)
        row_q = np.full(n, -1)
        row_q[self.pq] = self.n_va + np.arange(self.n_vm)
        # Four blocks: (row map, col map, use dVa?, take real part?)
        rows, cols, src, use_va, real = [], [], [], [], []
        for rmap, cmap, dva, re in (
            (row_p, row_p, True, True),   # dP/dVa
            (row_p, row_q, False, True),  # dP/dVm
            (row_q, row_p, True, False),  # dQ/dVa
            (row_q, row_q, False, False),  # dQ/dVm
        ):
            sel = np.flatnonzero((rmap[self.ri] >= 0) & (cmap[self.ci] >= 0))
            rows.append(rmap[self.ri[sel]])
            cols.append(cmap[self.ci[sel]])
            src.append(sel)
            use_va.append(np.full(len(sel), dva))
            real.append(np.full(len(sel), re))
        rows_a, cols_a = np.concatenate(rows), np.concatenate(cols)
        self.src = np.concatenate(src)
        self.use_va = np.concatenate(use_va)
        self.real = np.concatenate(real)
        # Order the entries column-major once, so a block-diagonal CSC can be assembled fast.
        order = np.lexsort((rows_a, cols_a))
        self.rows, self.cols = rows_a[order], cols_a[order]
        self.src, self.use_va, self.real = self.src[order], self.use_va[order], self.real[order]
        self.indptr = np.searchsorted(self.cols, np.arange(self.dim + 1))

    def jacobian_values(self, v: np.ndarray, ibus: np.ndarray) -> np.ndarray:
        """Jacobian entries (in CSC order) for states ``v`` (K, n) with bus currents ``ibus``."""
        vi, vk = v[:, self.ri], v[:, self.ci]
        vnk = vk / np.abs(vk)
        yv = self.y * vk
        ds_dva = -1j * vi * np.conj(yv)
        ds_dvm = vi * np.conj(self.y * vnk)
        d = self.diag
        ds_dva[:, d] += 1j * vi[:, d] * np.conj(ibus[:, self.ri[d]])
        ds_dvm[:, d] += np.conj(ibus[:, self.ri[d]]) * vnk[:, d]
        picked = np.where(self.use_va, ds_dva[:, self.src], ds_dvm[:, self.src])
        return np.where(self.real, picked.real, picked.imag)

    def block_diagonal(self, values: np.ndarray) -> sp.csc_matrix:
        """Block-diagonal CSC matrix with one Jacobian block per row of ``values``."""
        k, nnz = values.shape
        offsets = np.arange(k, dtype=np.int64) * self.dim
        indices = (self.rows[None, :] + offsets[:, None]).ravel()
        indptr = (self.indptr[None, :-1] + (np.arange(k) * nnz)[:, None]).ravel()
        indptr = np.r_[indptr, k * nnz]
        size = k * self.dim
        return sp.csc_matrix((values.ravel(), indices, indptr), shape=(size, size))


def _bus_roles(network: Network, pv, slack: str | None) -> tuple[int, np.ndarray]:
    slack_pos = network.reference_position if slack is None else int(
        network.bus_positions([slack])[0]
    )
    pv_arr = np.asarray(pv)
    pv_pos = np.flatnonzero(pv_arr) if pv_arr.dtype == bool else pv_arr.astype(np.int64)
    return slack_pos, pv_pos


def solve_power_flow_batch(
    network: Network,
    p_mw: np.ndarray,
    q_mvar: np.ndarray,
    v_set: np.ndarray,
    pv,
    *,
    in_service: np.ndarray | None = None,
    slack: str | None = None,
    vm0: np.ndarray | None = None,
    va0: np.ndarray | None = None,
    tol: float = TOLERANCE_PU,
    max_iter: int = 20,
    block: int = 1000,
) -> BatchPowerFlowResult:
    """Solve K power flows of one topology at once.

    ``p_mw``, ``q_mvar``: (K, n) net injections; ``v_set``: (n,) or (K, n) voltage set points
    used at PV buses and the slack; ``pv``: bool mask or positions of PV buses. ``vm0``/``va0``
    (K, n) or (n,) warm-start the iteration (default: flat start with the set points).
    Snapshots are solved in blocks of ``block``; each leaves the iteration once converged.
    """
    p = np.atleast_2d(np.asarray(p_mw, float))
    q = np.atleast_2d(np.asarray(q_mvar, float))
    k, n = p.shape
    if q.shape != (k, n) or n != network.n_bus:
        raise ValueError(f"injections must be (K, {network.n_bus}); got {p.shape} and {q.shape}")
    slack_pos, pv_pos = _bus_roles(network, pv, slack)
    ybus, _, _ = network.admittance_matrices(in_service)
    pat = _Pattern(ybus, slack_pos, pv_pos)
    vset = np.broadcast_to(np.asarray(v_set, float), (k, n))
    s_spec = (p + 1j * q) / network.base_mva
    fixed_v = np.zeros(n, bool)
    fixed_v[pv_pos] = True
    fixed_v[slack_pos] = True
    vm = np.where(fixed_v, vset, 1.0) if vm0 is None else np.broadcast_to(vm0, (k, n)).copy()
    vm = np.where(fixed_v, vset, vm)
    va = np.zeros((k, n)) if va0 is None else np.broadcast_to(va0, (k, n)).copy()
    v = vm * np.exp(1j * va)
    converged = np.zeros(k, bool)
    iterations = np.zeros(k, np.int64)
    mismatch = np.full(k, np.inf)
    ybus_t = ybus.T.tocsr()
    for start in range(0, k, block):
        rows = np.arange(start, min(start + block, k))
        vb, sb = v[rows], s_spec[rows]
        active = np.arange(len(rows))
        for it in range(max_iter + 1):
            ibus = vb[active] @ ybus_t
            ds = vb[active] * np.conj(ibus) - sb[active]
            f = np.hstack([ds[:, pat.pvpq].real, ds[:, pat.pq].imag])
            worst = np.abs(f).max(axis=1) if f.shape[1] else np.zeros(len(active))
            mismatch[rows[active]] = worst
            iterations[rows[active]] = it
            done = worst < tol
            converged[rows[active[done]]] = True
            bad = ~np.isfinite(worst)
            keep = ~done & ~bad
            if it == max_iter or not keep.any():
                break
            active, f, ibus = active[keep], f[keep], ibus[keep]
            jac = pat.block_diagonal(pat.jacobian_values(vb[active], ibus))
            lu = splu(jac, permc_spec="MMD_AT_PLUS_A")
            dx = -lu.solve(f.ravel()).reshape(len(active), pat.dim)
            vmag, vang = np.abs(vb[active]), np.angle(vb[active])
            vang[:, pat.pvpq] += dx[:, : pat.n_va]
            vmag[:, pat.pq] += dx[:, pat.n_va:]
            vb[active] = vmag * np.exp(1j * vang)
        v[rows] = vb
    return BatchPowerFlowResult(np.abs(v), np.angle(v), converged, iterations, mismatch)


def solve_power_flow(
    network: Network,
    p_mw: np.ndarray,
    q_mvar: np.ndarray,
    v_set: np.ndarray,
    pv,
    **options,
) -> PowerFlowResult:
    """Solve one power flow: (n,) arrays; ``options`` as for :func:`solve_power_flow_batch`
    (``in_service``, ``slack``, ``vm0``, ``va0``, ``tol``, ``max_iter``)."""
    res = solve_power_flow_batch(
        network, np.asarray(p_mw, float)[None, :], np.asarray(q_mvar, float)[None, :],
        np.asarray(v_set, float), pv, **options,
    )
    return PowerFlowResult(
        res.vm[0], res.va_rad[0], bool(res.converged[0]), int(res.iterations[0]),
        float(res.mismatch[0]),
    )


def solve_snapshots(
    network: Network,
    p_mw: np.ndarray,
    q_mvar: np.ndarray,
    v_set: np.ndarray,
    pv,
    in_service: np.ndarray,
    *,
    slack: str | None = None,
    tol: float = TOLERANCE_PU,
    max_iter: int = 20,
    stride: int = 16,
) -> BatchPowerFlowResult:
    """Solve a time series of K snapshots whose topology may differ.

    ``in_service`` is (K, n_branch): bool, or a float branch state with tap factors
    (:mod:`calibra.model.network`). Snapshots are grouped by topology. Within a group,
    every ``stride``-th snapshot is solved from a flat start first; the states in between are
    interpolated from those and used as warm starts, which saves Newton iterations when the
    operating point changes smoothly from one snapshot to the next (``stride=1``: no warm start).
    """
    status = np.asarray(in_service)
    p = np.atleast_2d(np.asarray(p_mw, float))
    q = np.atleast_2d(np.asarray(q_mvar, float))
    k = p.shape[0]
    if status.shape != (k, network.n_branch):
        raise ValueError(f"in_service must be (K, {network.n_branch}); got {status.shape}")
    vset = np.broadcast_to(np.asarray(v_set, float), (k, network.n_bus))
    topologies, group = np.unique(status, axis=0, return_inverse=True)
    out = BatchPowerFlowResult(
        np.zeros((k, network.n_bus)), np.zeros((k, network.n_bus)), np.zeros(k, bool),
        np.zeros(k, np.int64), np.zeros(k),
    )

    def run(rows: np.ndarray, topo: np.ndarray, vm0=None, va0=None) -> None:
        res = solve_power_flow_batch(
            network, p[rows], q[rows], vset[rows], pv, in_service=topo, slack=slack,
            vm0=vm0, va0=va0, tol=tol, max_iter=max_iter,
        )
        out.vm[rows], out.va_rad[rows] = res.vm, res.va_rad
        out.converged[rows], out.iterations[rows] = res.converged, res.iterations
        out.mismatch[rows] = res.mismatch

    for g, topo in enumerate(topologies):
        rows = np.flatnonzero(group.ravel() == g)
        if stride <= 1 or len(rows) <= 2 * stride:
            run(rows, topo)
            continue
        anchor = np.unique(np.r_[np.arange(0, len(rows), stride), len(rows) - 1])
        run(rows[anchor], topo)
        ok = out.converged[rows[anchor]]
        anchor_ok = anchor[ok]
        rest = np.setdiff1d(np.arange(len(rows)), anchor)
        if len(anchor_ok) < 2:
            run(rows[rest], topo)
            continue
        vm0 = _interpolate(rest, anchor_ok, out.vm[rows[anchor_ok]])
        va0 = _interpolate(rest, anchor_ok, out.va_rad[rows[anchor_ok]])
        run(rows[rest], topo, vm0, va0)
        retry = rows[rest][~out.converged[rows[rest]]]
        if len(retry):
            run(retry, topo)
    return out


def _interpolate(x: np.ndarray, xp: np.ndarray, fp: np.ndarray) -> np.ndarray:
    """Column-wise linear interpolation of rows ``fp`` (at positions ``xp``) to positions ``x``."""
    pos = np.clip(np.searchsorted(xp, x) - 1, 0, len(xp) - 2)
    w = ((x - xp[pos]) / (xp[pos + 1] - xp[pos]))[:, None]
    return fp[pos] * (1.0 - w) + fp[pos + 1] * w
