"""Measurement functions h(x) and their sparse Jacobian on the AC network model.

Every power-type quantity (flow at a branch end, bus injection) and every current magnitude is
written as a function of a *terminal*: a row ``y`` of admittances and a terminal bus ``k`` so that
the terminal current is ``I = y·V`` and the complex power ``S = V_k · conj(I)``. For a branch
from-end, ``y`` is the branch's row of Yf and ``k`` its from bus; for a to-end, Yt and the to bus;
for a bus injection, the bus's row of Ybus and the bus itself. This keeps one vectorised formula
for all quantities and for many snapshots at once (states as columns of a matrix).

The state is polar: angles of all buses but the reference(s), then magnitudes of all buses.
The sparsity pattern does not depend on the topology: a branch that is out of service keeps its
entries with zero admittance.
"""

from __future__ import annotations

import copy
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from calibra.model.network import Network, state_key

# Quantity codes used by the numerical kernels.
P_FLOW, Q_FLOW, I_MAG, P_INJ, Q_INJ, V_MAG = range(6)
QUANTITY_CODE = {
    "p_flow": P_FLOW, "q_flow": Q_FLOW, "i_magnitude": I_MAG,
    "p_injection": P_INJ, "q_injection": Q_INJ, "v_magnitude": V_MAG,
}
BRANCH_END_CODES = (P_FLOW, Q_FLOW, I_MAG)
#: Smoothing of |I| near zero current: h = sqrt(|I|² + eps²), in per unit. It biases h by up
#: to eps where no current flows, so it stays far below the finest current meter: 0.25 A on a
#: 0.22 kV generator terminal is 1e-6 pu on a 100 MVA base (1e-5 read 2.6 A there).
CURRENT_EPS = 1e-9


@dataclass(frozen=True)
class _Terminals:
    """Unique terminals used by a set of quantities, with a fixed sparsity pattern."""

    kind: np.ndarray  # 0 branch from-end, 1 branch to-end, 2 bus injection
    element: np.ndarray  # branch or bus position
    bus: np.ndarray  # terminal bus position (the voltage multiplying conj(I))
    entry_row: np.ndarray  # pattern entries: terminal index
    entry_col: np.ndarray  # pattern entries: bus position
    entry_is_terminal: np.ndarray  # bool: column equals the terminal bus


class MeasurementFunctions:
    """h(x) and H(x) for a fixed list of quantities on a network.

    Parameters
    ----------
    network : the network model.
    code : quantity code per row (see ``QUANTITY_CODE``).
    element : branch position for branch-end quantities, bus position otherwise.
    end : 0 (from) / 1 (to) for branch-end quantities, ignored otherwise.
    """

    def __init__(self, network: Network, code, element, end):
        self.network = network
        self.code = np.asarray(code, dtype=np.int64)
        self.element = np.asarray(element, dtype=np.int64)
        self.end = np.asarray(end, dtype=np.int64)
        self.m = len(self.code)
        self._build_terminals()
        self._build_gather()
        self._is_p = np.isin(self.code, (P_FLOW, P_INJ))
        self._is_q = np.isin(self.code, (Q_FLOW, Q_INJ))
        self._build_aggregators()
        self._values_cache: dict[bytes, np.ndarray] = {}
        self._pattern_cache: dict[tuple[bytes, bytes], tuple] = {}
        self._operator_cache: dict[int, tuple] = {}

    # ------------------------------------------------------------------ structure
    def _build_terminals(self) -> None:
        net = self.network
        adm = net.branch_admittances(np.ones(net.n_branch, bool))
        is_branch = np.isin(self.code, BRANCH_END_CODES)
        is_bus_power = np.isin(self.code, (P_INJ, Q_INJ))
        term_kind = np.where(is_branch, self.end, 2)
        term_kind = np.where(self.code == V_MAG, -1, term_kind)
        keys = term_kind * (max(net.n_bus, net.n_branch) + 1) + self.element
        uses_terminal = term_kind >= 0
        uniq, inverse = np.unique(keys[uses_terminal], return_inverse=True)
        self.terminal_of = np.full(self.m, -1, dtype=np.int64)
        self.terminal_of[uses_terminal] = inverse
        t_kind = np.empty(len(uniq), np.int64)
        t_elem = np.empty(len(uniq), np.int64)
        t_kind[inverse] = term_kind[uses_terminal]
        t_elem[inverse] = self.element[uses_terminal]
        t_bus = np.where(
            t_kind == 0, adm.f[np.minimum(t_elem, net.n_branch - 1)],
            np.where(t_kind == 1, adm.t[np.minimum(t_elem, net.n_branch - 1)], t_elem),
        )
        # Pattern: branch ends have two entries (own bus first); injections the Ybus row.
        ybus_pattern = self._ybus_pattern()
        rows, cols = [], []
        for ti, (k, e) in enumerate(zip(t_kind, t_elem, strict=True)):
            if k == 0:
                rows += [ti, ti]
                cols += [adm.f[e], adm.t[e]]
            elif k == 1:
                rows += [ti, ti]
                cols += [adm.t[e], adm.f[e]]
            else:
                nbrs = ybus_pattern.indices[ybus_pattern.indptr[e]:ybus_pattern.indptr[e + 1]]
                rows += [ti] * len(nbrs)
                cols += list(nbrs)
        rows_a = np.asarray(rows, np.int64)
        cols_a = np.asarray(cols, np.int64)
        self.terminals = _Terminals(
            t_kind, t_elem, t_bus, rows_a, cols_a, cols_a == t_bus[rows_a]
        )
        self.is_branch = is_branch
        self.is_bus_power = is_bus_power

    def _ybus_pattern(self) -> sp.csr_matrix:
        net = self.network
        adm = net.branch_admittances(np.ones(net.n_branch, bool))
        n = net.n_bus
        r = np.r_[adm.f, adm.t, np.arange(n)]
        c = np.r_[adm.t, adm.f, np.arange(n)]
        pat = sp.csr_matrix((np.ones(len(r)), (r, c)), shape=(n, n))
        pat.sum_duplicates()
        pat.sort_indices()
        return pat

    def buses_of(self, row: int) -> np.ndarray:
        """Positions of the buses row ``row``'s value depends on (whatever the topology)."""
        if self.code[row] == V_MAG:
            return np.array([self.element[row]], np.int64)
        tm = self.terminals
        return tm.entry_col[tm.entry_row == self.terminal_of[row]]

    def on_network(self, network: Network) -> MeasurementFunctions:
        """The same rows on a network of the same structure (same buses and branches in the
        same order) with other parameter values: the structure is shared, the admittances
        are the other network's."""
        out = copy.copy(self)
        out.network = network
        out._values_cache, out._operator_cache = {}, {}
        return out

    # ------------------------------------------------------------------ admittance values
    def entry_admittances(self, in_service: np.ndarray | None = None) -> np.ndarray:
        """Admittance of every pattern entry for a topology (cached per topology)."""
        net = self.network
        in_service = net.default_in_service() if in_service is None else \
            np.asarray(in_service)
        key = state_key(in_service)
        cached = self._values_cache.get(key)
        if cached is not None:
            return cached
        adm = net.branch_admittances(in_service)
        tm = self.terminals
        y = np.zeros(len(tm.entry_row), complex)
        kind = tm.kind[tm.entry_row]
        elem = tm.element[tm.entry_row]
        own = tm.entry_is_terminal
        b0 = kind == 0
        b1 = kind == 1
        y[b0 & own] = adm.yff[elem[b0 & own]]
        y[b0 & ~own] = adm.yft[elem[b0 & ~own]]
        y[b1 & own] = adm.ytt[elem[b1 & own]]
        y[b1 & ~own] = adm.ytf[elem[b1 & ~own]]
        inj = kind == 2
        if inj.any():
            ybus, _, _ = net.admittance_matrices(in_service)
            y[inj] = np.asarray(ybus[elem[inj], tm.entry_col[inj]]).ravel()
        if len(self._values_cache) > 64:
            self._values_cache.clear()
        self._values_cache[key] = y
        return y

    # ------------------------------------------------------------------ evaluation
    def evaluate(self, vm: np.ndarray, va: np.ndarray, in_service=None) -> np.ndarray:
        """h(x) in per unit for states given as magnitudes and angles (radians).

        ``vm``/``va`` of shape (n,) give h of shape (m,); of shape (n, k) give (m, k).
        """
        _, T, _ = self._admittance_operator(in_service)
        V = vm * np.exp(1j * va)
        return self._from_currents(V, T @ V, vm)

    def _from_currents(self, V, current, vm) -> np.ndarray:
        h = np.empty((self.m,) + V.shape[1:])
        rows_p, term_p, rows_q, term_q, rows_i, term_i, rows_v, bus_v = self._rows
        if rows_p.size or rows_q.size:
            s_term = V[self.terminals.bus] * np.conj(current)
            h[rows_p] = s_term[term_p].real
            h[rows_q] = s_term[term_q].imag
        if rows_i.size:
            h[rows_i] = np.sqrt(np.abs(current[term_i]) ** 2 + CURRENT_EPS ** 2)
        h[rows_v] = vm[bus_v]
        return h

    def evaluate_with_gradient(self, vm: np.ndarray, va: np.ndarray, state: StateLayout,
                               in_service, weights, phasors: np.ndarray | None = None,
                               ) -> tuple[np.ndarray, np.ndarray]:
        """h(x) and Hᵀ·w in one pass (the terminal currents are computed once); arguments in
        the order of :meth:`jacobian` (state, layout, in-service branches), then the weights.

        ``weights`` is either an (m, k) array w, or a pair (z, ω) for the weighted residual
        w = ω ∘ (z − h(x)), which needs h first. ``phasors``: exp(jθ) when already known.
        """
        _, T, TH = self._admittance_operator(in_service)
        Vn = unit_phasors(va) if phasors is None else phasors
        V = vm * Vn
        current = T @ V
        h = self._from_currents(V, current, vm)
        if isinstance(weights, tuple):
            z, omega = weights
            weighted = (z - h) * omega
        else:
            weighted = weights
        return h, self._gradient(vm, V, Vn, current, weighted, state, TH)

    def jacobian(
        self, vm: np.ndarray, va: np.ndarray, state: StateLayout, in_service=None
    ) -> sp.csr_matrix:
        """Sparse Jacobian ∂h/∂x (m × n_state) at one state (vectors of length n)."""
        r, c, v = self.jacobian_triplets(vm, va, state, in_service)
        return sp.csr_matrix((v, (r, c)), shape=(self.m, state.n_state))

    def jacobian_triplets(
        self, vm: np.ndarray, va: np.ndarray, state: StateLayout, in_service=None
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """The Jacobian as (row, column, value) arrays, unsorted, without duplicates.

        For states of shape (n, k) the values have shape (nnz, k): one Jacobian per column,
        all with the same sparsity pattern.
        """
        rows, cols = self.jacobian_pattern(state)
        vals = self.jacobian_values(vm, va, state, in_service)
        return rows, cols, vals

    def jacobian_pattern(self, state: StateLayout) -> tuple[np.ndarray, np.ndarray]:
        """Row and column of every Jacobian nonzero for a state layout (cached)."""
        rows, cols, _ = self._pattern_entry(state)
        return rows, cols

    def _pattern_entry(self, state: StateLayout) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        key = (state.angle_column.tobytes(), state.magnitude_column.tobytes())
        cached = self._pattern_cache.get(key)
        if cached is not None:
            return cached
        g = self._gather
        col = self.terminals.entry_col
        ent_p, ent_q, ent_i = g["p"][0], g["q"][0], g["i"][0]
        cols = np.concatenate([
            state.angle_column[col[ent_p]], state.magnitude_column[col[ent_p]],
            state.angle_column[col[ent_q]], state.magnitude_column[col[ent_q]],
            state.angle_column[col[ent_i]], state.magnitude_column[col[ent_i]],
            state.magnitude_column[self.element[g["v"][1]]],
        ])
        keep = cols >= 0
        result = (g["rows"][keep], cols[keep], keep)
        if len(self._pattern_cache) > 64:
            self._pattern_cache.clear()
        self._pattern_cache[key] = result
        return result

    def jacobian_values(self, vm, va, state: StateLayout, in_service=None) -> np.ndarray:
        """Values of the Jacobian nonzeros, in the order of :meth:`jacobian_pattern`."""
        y, T, _ = self._admittance_operator(in_service)
        Vn = np.exp(1j * va)
        V = vm * Vn
        tm = self.terminals
        current = T @ V
        col = tm.entry_col
        row = tm.entry_row
        yy = _bcast(y, V[col])
        own = _bcast(tm.entry_is_terminal, V[col])
        vk = V[tm.bus[row]]
        ik = current[row]
        vc, vnc = V[col], Vn[col]
        # dS/dθ_c and dS/d|V|_c for every pattern entry.
        ds_dth = 1j * (own * np.conj(ik) * vc - vk * np.conj(yy * vc))
        ds_dvm = vk * np.conj(yy * vnc) + own * np.conj(ik) * vnc
        g = self._gather
        ent_p, ent_q, ent_i = g["p"][0], g["q"][0], g["i"][0]
        ci = np.conj(ik[ent_i])
        mag = np.sqrt(np.abs(ik[ent_i]) ** 2 + CURRENT_EPS ** 2)
        di_dth = yy[ent_i] * 1j * vc[ent_i]
        di_dvm = yy[ent_i] * vnc[ent_i]
        vals = np.concatenate([
            ds_dth[ent_p].real, ds_dvm[ent_p].real,
            ds_dth[ent_q].imag, ds_dvm[ent_q].imag,
            (ci * di_dth).real / mag, (ci * di_dvm).real / mag,
            np.ones((g["v"][1].size,) + V.shape[1:]),
        ])
        return vals[self._pattern_entry(state)[2]]

    def _admittance_operator(self, in_service=None):
        """Entry admittances, the sparse operator T with terminal currents I = T·V, and Tᴴ."""
        y = self.entry_admittances(in_service)
        key = id(y)
        cached = self._operator_cache.get(key)
        if cached is not None and cached[0] is y:
            return cached
        tm = self.terminals
        T = sp.csr_matrix((y, (tm.entry_row, tm.entry_col)),
                          shape=(len(tm.kind), self.network.n_bus))
        # No stored zeros (branches out of service): a bus left out of an estimate (NaN) then
        # makes NaN exactly the values that depend on it.
        T.eliminate_zeros()
        TH = T.conj().T.tocsr()
        if len(self._operator_cache) > 64:
            self._operator_cache.clear()
        self._operator_cache[key] = (y, T, TH)
        return y, T, TH

    def _gradient(self, vm, V, Vn, current, weighted, state: StateLayout, TH) -> np.ndarray:
        """Hᵀ·w from the terminal currents.

        With ωₜ = ρᴾₜ − jρᵠₜ the weights of a terminal's P and Q rows, aₜ = V_bus(t)·ωₜ and
        κₜ = ρᴵₜ·conj(Iₜ)/|Iₜ| for current rows (B: terminal→bus incidence, T: terminal
        admittance rows), u = Bᵀ(conj(I)∘ω) + Tᵀκ and t = Tᴴa::

            ∂/∂θ   = Re( jV ∘ u − j conj(V) ∘ t ) = −|V| ∘ Im( Vn ∘ u − conj(Vn) ∘ t )
            ∂/∂|V| = Re( Vn ∘ u + conj(Vn) ∘ t ) + ρⱽ
        """
        rows_p, term_p, rows_q, term_q, rows_i, term_i, rows_v, bus_v = self._rows
        shape = (len(self.terminals.kind),) + weighted.shape[1:]
        shared = self._shared_terminals
        if shared is None:
            omega = np.zeros(shape, complex)
            omega.real[term_p] = weighted[rows_p]
            omega.imag[term_q] = -weighted[rows_q]
        else:
            omega = shared[0] @ weighted[rows_p] - 1j * (shared[1] @ weighted[rows_q])
        a = V[self.terminals.bus] * omega
        u = self._incidence_t @ (np.conj(current) * omega)
        t_part = TH @ a
        if rows_i.size:
            ci = np.conj(current[term_i])
            k_rows = weighted[rows_i] * ci / np.sqrt(np.abs(ci) ** 2 + CURRENT_EPS ** 2)
            if shared is None:
                kappa = np.zeros(shape, complex)
                kappa[term_i] = k_rows
            else:
                kappa = shared[2] @ k_rows
            # Tᵀκ = conj(Tᴴ conj(κ))
            u += np.conj(TH @ np.conj(kappa))
        A = Vn * u
        B = np.conj(Vn) * t_part
        g_th = -vm * (A.imag - B.imag)
        g_vm = A.real + B.real
        if rows_v.size and self._unique_voltage_buses:
            g_vm[bus_v] += weighted[rows_v]
        elif rows_v.size:
            np.add.at(g_vm, bus_v, weighted[rows_v])
        out = np.zeros((state.n_state,) + np.shape(vm)[1:])
        ang = state.angle_column >= 0
        out[state.angle_column[ang]] = g_th[ang]
        mg = state.magnitude_column >= 0
        out[state.magnitude_column[mg]] = g_vm[mg]
        return out

    def _build_aggregators(self) -> None:
        """Index arrays from measurement rows to their terminals (by part) and buses, and the
        terminal→bus incidence (transposed)."""
        nt = len(self.terminals.kind)
        n = self.network.n_bus
        t = self.terminal_of
        p = np.flatnonzero(self._is_p)
        q = np.flatnonzero(self._is_q)
        i = np.flatnonzero(self.code == I_MAG)
        v = np.flatnonzero(self.code == V_MAG)
        self._rows = (p, t[p], q, t[q], i, t[i], v, self.element[v])
        self._unique_voltage_buses = np.unique(self.element[v]).size == v.size
        # Two points may measure the same quantity (e.g. one terminal seen by two RTUs): their
        # weights then add up, through a sparse map instead of a plain assignment.
        self._shared_terminals = None
        if any(np.unique(t[r]).size < r.size for r in (p, q, i)):
            self._shared_terminals = tuple(
                sp.csr_matrix((np.ones(r.size), (t[r], np.arange(r.size))), shape=(nt, r.size))
                for r in (p, q, i))
        self._incidence_t = sp.csr_matrix(
            (np.ones(nt), (self.terminals.bus, np.arange(nt))), shape=(n, nt))

    def _build_gather(self) -> None:
        """Index arrays mapping pattern entries to Jacobian rows, by kind of derivative."""
        tm = self.terminals
        entries_of = _entries_by_terminal(tm.entry_row, len(tm.kind))
        t = self.terminal_of
        g: dict[str, tuple[np.ndarray, np.ndarray]] = {}
        for part, codes in (("p", (P_FLOW, P_INJ)), ("q", (Q_FLOW, Q_INJ)), ("i", (I_MAG,))):
            meas = np.flatnonzero(np.isin(self.code, codes))
            ent, owner = entries_of(t[meas])
            g[part] = (ent, meas[owner])
        vmeas = np.flatnonzero(self.code == V_MAG)
        g["v"] = (vmeas, vmeas)
        g["rows"] = np.concatenate([
            g["p"][1], g["p"][1], g["q"][1], g["q"][1], g["i"][1], g["i"][1], vmeas,
        ])
        self._gather = g


def unit_phasors(va: np.ndarray) -> np.ndarray:
    """exp(jθ) of bus angles, from cos and sin (cheaper than the complex exponential)."""
    out = np.empty(va.shape, complex)
    np.cos(va, out=out.real)
    np.sin(va, out=out.imag)
    return out


def _bcast(mask: np.ndarray, like: np.ndarray) -> np.ndarray:
    return mask.reshape((-1,) + (1,) * (like.ndim - 1))


def _entries_by_terminal(entry_row: np.ndarray, n_terminals: int):
    """Return a function mapping terminal ids to (entry indices, owner positions)."""
    order = np.argsort(entry_row, kind="stable")
    counts = np.bincount(entry_row, minlength=n_terminals)
    starts = np.r_[0, np.cumsum(counts)[:-1]]

    def lookup(terms: np.ndarray):
        n_each = counts[terms]
        owner = np.repeat(np.arange(len(terms)), n_each)
        offs = np.arange(n_each.sum()) - np.repeat(np.cumsum(n_each) - n_each, n_each)
        ent = order[np.repeat(starts[terms], n_each) + offs]
        return ent, owner

    return lookup


@dataclass(frozen=True)
class StateLayout:
    """Where each bus's angle and magnitude sit in the state vector.

    ``angle_column[b]`` is -1 for reference buses (angle held fixed) and for buses outside the
    estimated set; ``magnitude_column[b]`` is -1 for buses outside the estimated set.
    """

    angle_column: np.ndarray
    magnitude_column: np.ndarray
    n_state: int

    @classmethod
    def build(cls, n_bus: int, references, estimated: np.ndarray | None = None) -> StateLayout:
        est = np.ones(n_bus, bool) if estimated is None else np.asarray(estimated, bool)
        ang = est.copy()
        ang[np.asarray(references, np.int64)] = False
        angle_column = np.full(n_bus, -1, np.int64)
        angle_column[ang] = np.arange(ang.sum())
        magnitude_column = np.full(n_bus, -1, np.int64)
        magnitude_column[est] = ang.sum() + np.arange(est.sum())
        return cls(angle_column, magnitude_column, int(ang.sum() + est.sum()))

    def to_state(self, vm: np.ndarray, va: np.ndarray) -> np.ndarray:
        x = np.zeros(self.n_state)
        a = self.angle_column >= 0
        x[self.angle_column[a]] = va[a]
        m = self.magnitude_column >= 0
        x[self.magnitude_column[m]] = vm[m]
        return x

    def apply_step(self, vm: np.ndarray, va: np.ndarray, dx: np.ndarray):
        va = va.copy()
        vm = vm.copy()
        a = self.angle_column >= 0
        va[a] += dx[self.angle_column[a]]
        m = self.magnitude_column >= 0
        vm[m] += dx[self.magnitude_column[m]]
        return vm, va
