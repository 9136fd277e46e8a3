"""Numerical observability of a snapshot's measurement set: observable islands, lost buses.

The test works on the decoupled model of the measurements, as is usual in the trade
(Monticelli & Wu, IEEE Trans. PAS-104(5), 1985): active-power rows (flows, injections,
zero-injection constraints) against bus angles, reactive-power and voltage rows against voltage
magnitudes. Whether a state can be estimated does not depend on the impedances, only on which
branch each row involves, so every in-service branch gets a structural weight between 1 and 2
instead of its admittance: series capacitors (x < 0), bus couplers (|x| = 1e-5 pu), phase
shifters and taps far from 1 change nothing, and the numbers stay well scaled.

Angles (the P-θ side):

1. Every branch with an active-power flow row ties its two buses: θf − θt is known. Buses so
   tied form *flow islands* (connected components, scipy.sparse.csgraph).
2. An injection row (or zero-injection constraint) at bus k, Σⱼ wₖⱼ(θₖ − θⱼ), becomes a row over
   flow islands (each island's angle known up to one unknown). Flow islands linked by such rows
   form independent components, usually few and small.
3. In each component, two flow islands belong to one observable island exactly when their rows
   of a null-space basis of the reduced matrix agree (the difference of their angles lies in
   the row space). The component's null space comes from a dense SVD of its reduced matrix, a
   small one: the network itself is never factorized densely.

Magnitudes (the Q–V side) work the same way with reactive rows, plus |V| rows that fix a
magnitude absolutely: a bus's magnitude is known when its row of the null-space basis is zero.

A bus is estimated when its angle is tied to at least one other bus and its magnitude is
known. Rows that span two islands, or touch a bus that cannot be estimated, cannot be used
(their prediction would depend on the islands' arbitrary references); they are dropped and the
test repeated until nothing changes. Current magnitudes carry no sign and are left out of the
test, but used in the estimate where they touch one island only.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg as la
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from calibra.estimation.measurements import (
    BRANCH_END_CODES,
    I_MAG,
    P_FLOW,
    P_INJ,
    Q_FLOW,
    Q_INJ,
    V_MAG,
    MeasurementFunctions,
)
from calibra.model.network import Network, branch_status

#: Singular values below this share of the largest (times the matrix size) count as zero. The
#: reduced matrices hold sums of structural weights between 1 and 2, so their nonzero singular
#: values stay far above it.
_RANK_TOL = 1e-10
#: Projections of null-space rows closer than this are the same island.
_SAME_ROW = 1e-7
_ROUNDS = 8  #: at most this many passes dropping unusable rows (one or two are the rule)


@dataclass(frozen=True)
class Observability:
    """Outcome of the observability test for one snapshot's measurement set.

    ``island`` labels each bus with its observable island (0, 1, …) or -1 when its state cannot
    be estimated; ``references`` holds one angle-reference bus position per island.
    ``usable`` marks the measurement rows that may enter the estimate (they touch the buses of
    one island only), ``constraints_usable`` the same for the zero-injection constraints.
    """

    observable: bool
    island: np.ndarray
    references: np.ndarray
    reason: str
    usable: np.ndarray
    constraints_usable: np.ndarray

    @property
    def estimated_buses(self) -> np.ndarray:
        return self.island >= 0

    @property
    def n_islands(self) -> int:
        return int(self.island.max() + 1) if (self.island >= 0).any() else 0

    def covers(self, other: Observability) -> bool:
        """Whether this outcome estimates every bus ``other`` does, in no more islands."""
        return bool(np.all(self.estimated_buses | ~other.estimated_buses)
                    and self.n_islands <= other.n_islands)


def _structural_weights(n_branch: int) -> np.ndarray:
    """Fixed weights in [1, 2) per branch (a low-discrepancy sequence): generic values, so no
    accidental cancellation, and the same in every run."""
    return 1.0 + np.mod(np.arange(1, n_branch + 1) * 0.6180339887498949, 1.0)


class ObservabilityStructure:
    """The rows of a measurement set and the zero-injection constraints, in structural form,
    for one topology; :meth:`analyse` tests one availability pattern."""

    def __init__(self, network: Network, code, element, in_service: np.ndarray,
                 cons_code=(), cons_element=()):
        self.network = network
        self.n = n = network.n_bus
        adm = network.branch_admittances(np.ones(network.n_branch, bool))
        in_service = branch_status(in_service)
        self.f, self.t = adm.f, adm.t
        self.on = in_service & (adm.f != adm.t)
        code = np.r_[np.asarray(code, np.int64), np.asarray(cons_code, np.int64)]
        element = np.r_[np.asarray(element, np.int64), np.asarray(cons_element, np.int64)]
        self.m = len(code) - len(cons_code)
        self.code, self.element = code, element
        w = np.where(self.on, _structural_weights(network.n_branch), 0.0)
        on = np.flatnonzero(self.on)
        f, t = adm.f[on], adm.t[on]
        a = sp.csr_matrix((np.r_[w[on], w[on]], (np.r_[f, t], np.r_[t, f])), shape=(n, n))
        a.sum_duplicates()
        self.laplacian = (sp.diags(np.asarray(a.sum(axis=1)).ravel()) - a).tocsr()
        #: Buses without an in-service branch carry no state worth estimating (de-energized).
        self.dead = np.diff(a.indptr) == 0
        _, electrical = connected_components(a, directed=False)
        self.n_energized_parts = int(np.unique(electrical[~self.dead]).size)
        self.touch = self._touch_matrix()
        branch = np.isin(code, BRANCH_END_CODES)
        e = np.where(branch, element, 0)
        self.flow_on = branch & self.on[e]  # flow rows of in-service branches
        self.is_p_flow = (code == P_FLOW) & self.flow_on
        self.is_q_flow = (code == Q_FLOW) & self.flow_on
        self.is_p_inj = code == P_INJ
        self.is_q_inj = code == Q_INJ
        self.is_v = code == V_MAG
        self.in_test = code != I_MAG
        # Laplacian entries of every injection row (and constraint), as flat arrays: row of
        # the model, bus, weight (the reduced matrices are built from slices of these).
        inj = np.flatnonzero(np.isin(code, (P_INJ, Q_INJ)))
        lap = self.laplacian[element[inj]].tocoo() if inj.size else sp.coo_matrix((0, n))
        order = np.argsort(inj[lap.row], kind="stable")
        self._lap_row = inj[lap.row][order]
        self._lap_bus = lap.col[order].astype(np.int64)
        self._lap_val = lap.data[order]
        self._lap_start = np.searchsorted(self._lap_row, np.arange(len(code) + 1))

    def _touch_matrix(self) -> sp.csr_matrix:
        """Buses each row depends on in this topology (rows × buses, 0/1)."""
        code, el = self.code, self.element
        rows, cols = [], []
        branch = np.isin(code, BRANCH_END_CODES)
        r = np.flatnonzero(branch & self.on[np.where(branch, el, 0)])
        rows += [r, r]
        cols += [self.f[el[r]], self.t[el[r]]]
        inj = np.flatnonzero(np.isin(code, (P_INJ, Q_INJ)))
        if inj.size:
            sub = self.laplacian[el[inj]].tocoo()
            rows.append(inj[sub.row])
            cols.append(sub.col)
            rows.append(inj)  # the bus itself, even without an in-service branch
            cols.append(el[inj])
        v = np.flatnonzero(code == V_MAG)
        rows.append(v)
        cols.append(el[v])
        rr, cc = np.concatenate(rows), np.concatenate(cols)
        out = sp.csr_matrix((np.ones(rr.size), (rr, cc)), shape=(len(code), self.n))
        out.sum_duplicates()
        out.data[:] = 1.0
        return out

    # ------------------------------------------------------------------ one pattern
    def analyse(self, available: np.ndarray, reference: int) -> Observability:
        """Observability of the measurement rows marked ``available`` plus every constraint."""
        total = len(self.code)
        active = np.ones(total, bool)
        active[:self.m] = np.asarray(available, bool)
        island = np.full(self.n, -1, np.int64)
        usable = np.zeros(total, bool)
        for _ in range(_ROUNDS):
            angle_group = self._angle_groups(active & self.in_test)
            v_known = self._magnitudes_known(active & self.in_test)
            sizes = np.bincount(angle_group, minlength=1)
            estimable = v_known & (sizes[angle_group] > 1)
            _, island = np.unique(np.where(estimable, angle_group, -1), return_inverse=True)
            island = island.ravel() - (0 if estimable.all() else 1)
            island[~estimable] = -1
            usable = self._within_one_island(island)
            still = active & usable
            if np.array_equal(still, active):
                break
            active = still
        refs = []
        for g in range(int(island.max()) + 1 if (island >= 0).any() else 0):
            members = np.flatnonzero(island == g)
            refs.append(reference if reference in members else int(members[0]))
        lost = int(((island < 0) & ~self.dead).sum())
        observable = lost == 0 and len(refs) == self.n_energized_parts
        if observable:
            reason = "observable"
        elif not refs:
            reason = "not observable: no bus can be estimated"
        else:
            reason = (f"not fully observable: {len(refs)} observable island(s), "
                      f"{lost} bus(es) cannot be estimated")
        return Observability(observable, island, np.asarray(refs, np.int64), reason,
                             usable[:self.m].copy(), usable[self.m:].copy())

    def _within_one_island(self, island: np.ndarray) -> np.ndarray:
        """Rows whose buses all lie in one island (rows touching no bus, such as the flow of an
        open branch, are harmless and usable)."""
        T = self.touch
        label = island.astype(float)
        counts = np.diff(T.indptr)
        lab = label[T.indices]
        lo = np.full(T.shape[0], np.inf)
        hi = np.full(T.shape[0], -np.inf)
        has = counts > 0
        starts = T.indptr[:-1][has]
        lo[has] = np.minimum.reduceat(lab, starts)
        hi[has] = np.maximum.reduceat(lab, starts)
        return ~has | ((lo >= 0) & (lo == hi))

    def _angle_groups(self, active: np.ndarray) -> np.ndarray:
        """Label per bus: buses with equal labels have known angle differences."""
        flows = np.flatnonzero(active & self.is_p_flow)
        rows = np.flatnonzero(active & self.is_p_inj)
        return self._groups(flows, rows, absolute=np.zeros(0, np.int64))[0]

    def _magnitudes_known(self, active: np.ndarray) -> np.ndarray:
        flows = np.flatnonzero(active & self.is_q_flow)
        rows = np.flatnonzero(active & self.is_q_inj)
        absolute = np.flatnonzero(active & self.is_v)
        return self._groups(flows, rows, absolute)[1]

    def _groups(self, flows: np.ndarray, rows: np.ndarray, absolute: np.ndarray
                ) -> tuple[np.ndarray, np.ndarray]:
        """Group buses whose values are known relative to each other, and which are known
        absolutely, from difference rows (flows), Laplacian rows (injections) and absolute
        rows (|V|) — the null space of the reduced matrix, component by component."""
        n = self.n
        e = self.element[flows]
        tie = sp.csr_matrix((np.ones(e.size), (self.f[e], self.t[e])), shape=(n, n))
        n_fi, flow_island = connected_components(tie, directed=False)
        # Injection rows over flow islands (summed per island; entries that cancel dropped),
        # then one absolute row per flow island with a |V| row.
        starts, ends = self._lap_start[rows], self._lap_start[rows + 1]
        counts = ends - starts
        take = np.repeat(starts - np.r_[0, np.cumsum(counts)[:-1]], counts) + \
            np.arange(counts.sum())
        r_local = np.repeat(np.arange(rows.size), counts)
        key = r_local * n_fi + flow_island[self._lap_bus[take]]
        ukey, inverse = np.unique(key, return_inverse=True)
        val = np.bincount(inverse.ravel(), self._lap_val[take], minlength=ukey.size)
        keep = np.abs(val) >= 1e-12
        a_row, a_col, a_val = ukey[keep] // max(n_fi, 1), ukey[keep] % max(n_fi, 1), val[keep]
        fixed = np.unique(flow_island[self.element[absolute]])
        n_rows = rows.size
        a_row = np.r_[a_row, n_rows + np.arange(fixed.size)]
        a_col = np.r_[a_col, fixed]
        a_val = np.r_[a_val, np.ones(fixed.size)]
        # Components of flow islands linked by rows: a graph of flow islands and rows.
        size = n_fi + n_rows + fixed.size
        link = sp.csr_matrix((np.ones(a_row.size), (a_col, n_fi + a_row)), shape=(size, size))
        _, label = connected_components(link, directed=False)
        _, comp = np.unique(label[:n_fi], return_inverse=True)
        comp = comp.ravel()
        n_comp = int(comp.max()) + 1 if n_fi else 0
        group = np.arange(n_fi)
        known = np.zeros(n_fi, bool)
        if a_row.size:
            used_rows, row_ids = np.unique(a_row, return_inverse=True)
            A = sp.coo_matrix((a_val, (row_ids.ravel(), a_col)), shape=(used_rows.size, n_fi))
            self._solve_components(A, comp, n_comp, group, known)
        # Relabel groups densely per bus.
        _, bus_group = np.unique(group[flow_island], return_inverse=True)
        return bus_group.ravel(), known[flow_island]


    @staticmethod
    def _solve_components(A: sp.coo_matrix, comp: np.ndarray, n_comp: int, group: np.ndarray,
                          known: np.ndarray) -> None:
        """Groups and absolutely known columns of every component of A (in place). Rows of
        one column can only be absolute (difference rows sum to zero): known. Two columns
        linked by a difference row: one group, known when an absolute row is there too.
        Larger components: the null space of their dense block."""
        sizes = np.bincount(comp, minlength=n_comp)
        row_comp = np.full(A.shape[0], -1, np.int64)
        row_comp[A.row] = comp[A.col]
        rows_in = np.bincount(row_comp, minlength=n_comp)
        nnz_row = np.bincount(A.row, minlength=A.shape[0])
        absolute = np.zeros(n_comp, bool)
        absolute[row_comp[nnz_row == 1]] = True  # a row on one column only
        col_has_rows = rows_in[comp] > 0
        one = (sizes[comp] == 1) & col_has_rows
        known[one] = True
        two = np.flatnonzero((sizes == 2) & (rows_in > 0))
        if two.size:
            in_two = np.isin(comp, two)
            first = np.full(n_comp, -1, np.int64)
            cols = np.flatnonzero(in_two)
            first[comp[cols[::-1]]] = cols[::-1]
            group[in_two] = first[comp[in_two]]
            known[in_two] = absolute[comp[in_two]]
        big = np.flatnonzero((sizes >= 3) & (rows_in > 0))
        if big.size == 0:
            return
        members = _members(comp, n_comp)
        entry_comp = comp[A.col]
        keep = np.isin(entry_comp, big)
        r, c, v, ec = A.row[keep], A.col[keep], A.data[keep], entry_comp[keep]
        order = np.argsort(ec, kind="stable")
        r, c, v, ec = r[order], c[order], v[order], ec[order]
        bounds = np.searchsorted(ec, np.r_[big, big[-1] + 1]) if big.size else []
        local = np.empty(len(comp), np.int64)
        for k, b in enumerate(big):
            cols = members[b]
            local[cols] = np.arange(cols.size)
            a, e = bounds[k], bounds[k + 1]
            rr = r[a:e]
            urows, rloc = np.unique(rr, return_inverse=True)
            dense = np.zeros((urows.size, cols.size))
            np.add.at(dense, (rloc, local[c[a:e]]), v[a:e])
            g, kn = _null_space_groups(dense)
            group[cols] = cols[g]
            known[cols] = kn


def _members(labels: np.ndarray, count: int) -> list[np.ndarray]:
    order = np.argsort(labels, kind="stable")
    bounds = np.searchsorted(labels[order], np.arange(count + 1))
    return [order[bounds[c]:bounds[c + 1]] for c in range(count)]


def _null_space_groups(A: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """For the columns of a small dense matrix: a group label (columns whose null-space rows
    agree: their differences are determined) and whether each column is determined absolutely
    (its null-space row is zero)."""
    null = _null_space(A)
    c = A.shape[1]
    if null.shape[1] == 0:
        return np.zeros(c, np.int64), np.ones(c, bool)
    known = np.abs(null).max(axis=1) < _SAME_ROW
    # Two fixed random projections of each null-space row; equal rows give equal values.
    rng = np.random.default_rng(20261202)
    proj = null @ rng.standard_normal((null.shape[1], 2))
    label = np.zeros(c, np.int64)
    for d in range(2):
        order = np.argsort(proj[:, d], kind="stable")
        split = np.r_[False, np.diff(proj[order, d]) > _SAME_ROW]
        part = np.empty(c, np.int64)
        part[order] = np.cumsum(split)
        label = label * (c + 1) + part
    _, label = np.unique(label, return_inverse=True)
    return label.ravel(), known


def _null_space(A: np.ndarray) -> np.ndarray:
    """An orthonormal basis of the null space of A (c × (c − rank)) by QR with column
    pivoting: rank-revealing on these matrices (rows of structural weights between 1 and 2,
    scaled to unit length, so the nonzero pivots stay far above the tolerance) and several
    times cheaper than an SVD. Which columns agree, or vanish, in the null space does not
    depend on the basis chosen, so this gives the SVD's groups."""
    A = A / np.maximum(np.linalg.norm(A, axis=1), 1e-300)[:, None]
    r, c = A.shape
    R, piv = la.qr(A, mode="r", pivoting=True, check_finite=False)
    d = np.abs(np.diag(R))
    tol = _RANK_TOL * max(r, c) * (d[0] if d.size else 1.0)
    rank = int((d > tol).sum())
    if rank == c:
        return np.zeros((c, 0))
    # A P = Q [R11 R12; 0 0]: the null space is P [−R11⁻¹R12; I].
    basis = np.zeros((c, c - rank))
    basis[:rank] = -la.solve_triangular(R[:rank, :rank], R[:rank, rank:c], check_finite=False)
    basis[rank:] = np.eye(c - rank)
    null = np.empty_like(basis)
    null[piv] = basis
    return la.qr(null, mode="economic", check_finite=False)[0]


def structure_for(funcs: MeasurementFunctions, constraints: MeasurementFunctions | None,
                  in_service: np.ndarray) -> ObservabilityStructure:
    """The observability structure of a measurement model's rows for one topology."""
    cc = constraints.code if constraints is not None else np.zeros(0, np.int64)
    ce = constraints.element if constraints is not None else np.zeros(0, np.int64)
    return ObservabilityStructure(funcs.network, funcs.code, funcs.element, in_service, cc, ce)


def analyse_observability(
    funcs: MeasurementFunctions,
    available: np.ndarray,
    constraints: MeasurementFunctions | None,
    in_service: np.ndarray,
    reference: int,
    structure: ObservabilityStructure | None = None,
) -> Observability:
    """Observability of the measurement rows marked ``available`` (plus all constraints).

    ``funcs`` holds the measurements; ``constraints`` the zero-injection equalities, which count
    as exact measurements. ``structure`` (built for this topology) saves rebuilding the rows.
    """
    st = structure or structure_for(funcs, constraints, in_service)
    return st.analyse(available, reference)
