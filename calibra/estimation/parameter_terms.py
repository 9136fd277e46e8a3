"""What a shared unknown of many snapshots does to the measurement model: network parameters and
constant meter errors as extra columns of the Jacobian, and the Schur complement that eliminates
every snapshot's state.

A *term* is one unknown shared by all snapshots of a sample: a network parameter
(:class:`~calibra.model.parameters.NetworkParameter`: it changes the branch admittances and so
h(x) and the zero injections) or a constant error of one meter (:class:`MeterTerm`: measured =
(1 + β)·h, or h + β). With the terms θ the measurement model of snapshot k is
z_k = h(x_k, θ) + e, zero injections c(x_k, θ) = 0.

Gauss-Newton on [x₁ … x_K, θ] has a bordered (arrow) structure: each snapshot's block is its own
KKT matrix K_k = [[G_k, C_kᵀ], [C_k, 0]] (G_k = H_kᵀWH_k), coupled only through θ by
U_k = [H_kᵀWA_k; C_θk] (A_k = ∂h/∂θ, C_θk = ∂c/∂θ). Eliminating the states gives the Schur
complement on θ::

    Σ = Σ_k (A_kᵀWA_k − U_kᵀK_k⁻¹U_k),   q = Σ_k (A_kᵀWr_k − U_kᵀK_k⁻¹f_k),   f_k = [H_kᵀWr_k; −c_k]
    Δθ = Σ⁻¹q,   [Δx_k; λ_k] = K_k⁻¹(f_k − U_kΔθ)

Σ⁻¹ is θ's covariance (the θ block of the inverse of the whole KKT matrix); at θ held at its
model value, q is the Lagrange multiplier of that constraint and q/√Σ its normalized value
(Zhu & Abur, "Identification of network parameter errors", IEEE Trans. Power Systems 21(2),
2006, from memory), q ᵀΣ⁻¹q the objective drop of one step. Each K_k is factorized sparsely
(:func:`calibra.estimation.covariance.kkt_solver`), never inverted densely.
"""

from __future__ import annotations

from dataclasses import dataclass
from enum import StrEnum

import numpy as np
import scipy.sparse as sp

from calibra.estimation.covariance import kkt_solver, stiff_transform
from calibra.estimation.measurement_model import MeasurementModel
from calibra.estimation.measurements import (
    I_MAG,
    P_FLOW,
    P_INJ,
    Q_FLOW,
    Q_INJ,
    MeasurementFunctions,
    StateLayout,
)
from calibra.model.network import Network
from calibra.model.parameters import (
    NetworkParameter,
    admittance_derivative,
    model_value,
    with_parameters,
)


class MeterError(StrEnum):
    """A constant error of one meter over the sample."""

    SCALE = "scale"  #: measured = (1 + β) × true
    OFFSET = "offset"  #: measured = true + β (per unit)


@dataclass(frozen=True)
class MeterTerm:
    """A constant error shared by the meters in ``rows`` of the measurement model: one row,
    or the P, Q and |I| rows one current transformer feeds (a wrong CT ratio scales them
    all)."""

    rows: tuple[int, ...]
    kind: MeterError

    def __post_init__(self) -> None:
        object.__setattr__(self, "rows", tuple(int(r) for r in np.atleast_1d(self.rows)))


Term = NetworkParameter | MeterTerm


def parameter_column(funcs: MeasurementFunctions, network: Network, parameter: NetworkParameter,
                     vm: np.ndarray, va: np.ndarray, in_service: np.ndarray) -> np.ndarray:
    """∂h/∂p of every row of ``funcs`` at one state (vectors of length n), analytic from the
    branch admittances' derivative (:func:`calibra.model.parameters.admittance_derivative`):
    dI = dY·V at the terminals the parameter touches, dS = V_bus·conj(dI),
    d|I| = Re(conj(I)dI)/|I|. Zero when the branch is out of service."""
    maker = ColumnMaker(funcs)
    return maker.column(funcs, network, parameter, admittance_derivative(network, parameter),
                        vm, va, in_service)


class ColumnMaker:
    """∂h/∂p for the rows of one measurement structure (shared by its network variants)."""

    def __init__(self, funcs: MeasurementFunctions):
        code = funcs.code
        self.p_rows = np.flatnonzero(np.isin(code, (P_FLOW, P_INJ)))
        self.q_rows = np.flatnonzero(np.isin(code, (Q_FLOW, Q_INJ)))
        self.i_rows = np.flatnonzero(code == I_MAG)
        self.m = funcs.m
        tm = funcs.terminals
        self.n_terminals = len(tm.kind)
        self._places: dict[tuple[str, bool], tuple] = {}

    def _place(self, funcs: MeasurementFunctions, network: Network,
               parameter: NetworkParameter) -> tuple:
        """Bus or branch position and the terminals it touches (cached)."""
        key = (parameter.element, parameter.on_bus)
        place = self._places.get(key)
        if place is None:
            tm = funcs.terminals
            if parameter.on_bus:
                b = int(network.bus_positions([parameter.element])[0])
                place = (b, np.flatnonzero((tm.kind == 2) & (tm.element == b)))
            else:
                e = int(network.branch_positions([parameter.element])[0])
                adm = network.branch_admittances(np.ones(network.n_branch, bool))
                f, t = int(adm.f[e]), int(adm.t[e])
                place = (e, f, t, np.flatnonzero((tm.kind == 0) & (tm.element == e)),
                         np.flatnonzero((tm.kind == 1) & (tm.element == e)),
                         np.flatnonzero((tm.kind == 2) & (tm.element == f)),
                         np.flatnonzero((tm.kind == 2) & (tm.element == t)))
            self._places[key] = place
        return place

    def column(self, funcs: MeasurementFunctions, network: Network,
               parameter: NetworkParameter, dY: np.ndarray, vm: np.ndarray, va: np.ndarray,
               in_service: np.ndarray) -> np.ndarray:
        """∂h/∂p given the admittance derivative ``dY`` (see :func:`parameter_column`)."""
        tm = funcs.terminals
        place = self._place(funcs, network, parameter)
        dI = np.zeros(self.n_terminals, complex)
        if parameter.on_bus:
            b, inj = place
            V_b = vm[b] * np.exp(1j * va[b])
            dI[inj] = dY[0] * V_b
        else:
            e, f, t, own_f, own_t, inj_f, inj_t = place
            if not in_service[e]:
                return np.zeros(self.m)
            Vf, Vt = vm[f] * np.exp(1j * va[f]), vm[t] * np.exp(1j * va[t])
            from_end = dY[0] * Vf + dY[1] * Vt
            to_end = dY[2] * Vf + dY[3] * Vt
            dI[own_f] = from_end
            dI[own_t] = to_end
            dI[inj_f] += from_end
            dI[inj_t] += to_end
        touched = np.flatnonzero(dI)
        col = np.zeros(self.m)
        if touched.size == 0:
            return col
        bus = tm.bus[touched]
        dS = np.zeros(self.n_terminals, complex)
        dS[touched] = vm[bus] * np.exp(1j * va[bus]) * np.conj(dI[touched])
        term = funcs.terminal_of
        col[self.p_rows] = dS[term[self.p_rows]].real
        col[self.q_rows] = dS[term[self.q_rows]].imag
        i_rows = self.i_rows[dI[term[self.i_rows]] != 0]
        if i_rows.size:
            y = funcs.entry_admittances(in_service)
            sel = np.isin(tm.entry_row, touched)
            current = np.zeros(self.n_terminals, complex)
            np.add.at(current, tm.entry_row[sel],
                      y[sel] * vm[tm.entry_col[sel]] * np.exp(1j * va[tm.entry_col[sel]]))
            ci = current[term[i_rows]]
            col[i_rows] = (np.conj(ci) * dI[term[i_rows]]).real / np.maximum(np.abs(ci), 1e-12)
        return col


@dataclass
class SampleSnapshot:
    """One snapshot of a sample: its per-unit values, topology, rows used and state."""

    position: int  # in the period
    z: np.ndarray  # m, per unit (NaN = missing)
    in_service: np.ndarray
    rows: np.ndarray  # measurement rows used
    constraint_rows: np.ndarray  # zero-injection constraints used
    layout: StateLayout
    vm: np.ndarray
    va: np.ndarray
    transform: sp.csr_matrix | None  # stiff-branch change of variables (or None)


@dataclass
class Linearized:
    """One snapshot linearized at its state and the terms' values (rows used only)."""

    r: np.ndarray
    w: np.ndarray
    H: sp.csr_matrix
    A: np.ndarray  # rows × terms
    C: sp.csr_matrix
    c: np.ndarray
    Cp: np.ndarray  # constraints × terms


def start_values(model: MeasurementModel, terms: list[Term]) -> np.ndarray:
    """The model's values of network parameters, 0 for meter errors."""
    return np.array([model_value(model.network, t) if isinstance(t, NetworkParameter) else 0.0
                     for t in terms])


class TermModel:
    """h(x, θ), its Jacobians and the constraints for a list of terms on one measurement model."""

    def __init__(self, model: MeasurementModel, terms: list[Term]):
        self.model = model
        self.terms = list(terms)
        self.network_terms = [i for i, t in enumerate(self.terms)
                              if isinstance(t, NetworkParameter)]
        self.model_values = start_values(model, self.terms)
        self._makers = (ColumnMaker(model.functions), ColumnMaker(model.constraints))
        self._derivatives: dict[tuple, np.ndarray] = {}

    def _variant(self, theta: np.ndarray):
        """The network and measurement functions with the network terms at ``theta``."""
        model = self.model
        # Parameters at their model values change nothing: no network copy for them.
        values = {self.terms[i]: float(theta[i]) for i in self.network_terms
                  if theta[i] != self.model_values[i]}
        if not values:
            return model.network, model.functions, model.constraints, ()
        net = with_parameters(model.network, values)
        key = tuple(sorted((str(p.element), str(p.kind), v) for p, v in values.items()))
        return net, model.functions.on_network(net), model.constraints.on_network(net), key

    def _derivative(self, i: int, net: Network, key: tuple) -> np.ndarray:
        cached = self._derivatives.get((i, key))
        if cached is None:
            if len(self._derivatives) > 4096:
                self._derivatives.clear()
            cached = self._derivatives[(i, key)] = admittance_derivative(net, self.terms[i])
        return cached

    def linearize(self, snap: SampleSnapshot, theta: np.ndarray,
                  columns: slice | None = None) -> Linearized:
        """Residuals, Jacobians and the columns of the terms in ``columns`` (default all)."""
        model = self.model
        net, funcs, cons, key = self._variant(theta)
        vm, va, ins = snap.vm, snap.va, snap.in_service
        h = funcs.evaluate(vm, va, ins)
        gain = np.ones(model.m)
        bias = np.zeros(model.m)
        for i, term in enumerate(self.terms):
            if isinstance(term, MeterTerm):
                rows_of = list(term.rows)
                if term.kind == MeterError.SCALE:
                    gain[rows_of] *= 1.0 + theta[i]
                else:
                    bias[rows_of] += theta[i]
        rows, crow = snap.rows, snap.constraint_rows
        r = snap.z[rows] - (gain * h + bias)[rows]
        H = sp.diags(gain[rows]) @ funcs.jacobian(vm, va, snap.layout, ins)[rows]
        C = cons.jacobian(vm, va, snap.layout, ins)[crow] if crow.size else \
            sp.csr_matrix((0, snap.layout.n_state))
        c = cons.evaluate(vm, va, ins)[crow] if crow.size else np.zeros(0)
        w = 1.0 / model.sigma_pu[rows] ** 2
        A, Cp = self.columns(snap, net, funcs, cons, key, h, gain,
                             columns or slice(0, len(self.terms)))
        return Linearized(r, w, sp.csr_matrix(H), A, sp.csr_matrix(C), c, Cp)

    def columns(self, snap: SampleSnapshot, net, funcs, cons, key, h, gain,
                columns: slice) -> tuple[np.ndarray, np.ndarray]:
        """∂h/∂θ and ∂c/∂θ (rows and constraints used) of the terms in ``columns``."""
        rows, crow = snap.rows, snap.constraint_rows
        idx = range(*columns.indices(len(self.terms)))
        A = np.zeros((rows.size, len(idx)))
        Cp = np.zeros((crow.size, len(idx)))
        vm, va, ins = snap.vm, snap.va, snap.in_service
        where = None
        for j, i in enumerate(idx):
            term = self.terms[i]
            if isinstance(term, NetworkParameter):
                dY = self._derivative(i, net, key)
                A[:, j] = (gain * self._makers[0].column(funcs, net, term, dY, vm, va,
                                                         ins))[rows]
                if crow.size:
                    Cp[:, j] = self._makers[1].column(cons, net, term, dY, vm, va, ins)[crow]
            else:
                if where is None:
                    where = np.full(self.model.m, -1)
                    where[rows] = np.arange(rows.size)
                rows_of = np.asarray(term.rows)
                at = where[rows_of]
                seen = at >= 0
                A[at[seen], j] = h[rows_of[seen]] if term.kind == MeterError.SCALE else 1.0
        return A, Cp


@dataclass
class SchurTerms:
    """The Schur complement on the terms over a sample, and what a step needs."""

    q: np.ndarray  # terms
    sigma: np.ndarray  # terms × terms (only its diagonal when asked for the diagonal)
    objective: float  # Σ rᵀWr at the linearization point
    solutions: list[np.ndarray]  # per snapshot: K⁻¹[f, U] (state and multiplier rows)


#: Terms whose columns are formed at once (bounds a rows × terms array on a large network).
COLUMN_CHUNK = 64


def schur_terms(term_model: TermModel, sample: list[SampleSnapshot], theta: np.ndarray,
                diagonal: bool = False, progress=None) -> SchurTerms:
    """Σ, q and each snapshot's K_k⁻¹[f_k, U_k] at the snapshots' states and ``theta``; one
    factorization per snapshot for every term. ``diagonal``: Σ's diagonal only (screening many
    terms; no solutions kept)."""
    n_t = len(term_model.terms)
    q = np.zeros(n_t)
    sigma = np.zeros((n_t, n_t)) if not diagonal else np.zeros(n_t)
    objective = 0.0
    solutions = []
    for j, snap in enumerate(sample):
        if progress is not None:
            progress.update(j, len(sample), "screening parameters")
        lin = term_model.linearize(snap, theta, slice(0, 0) if diagonal else None)
        WH = sp.diags(lin.w) @ lin.H
        G = (lin.H.T @ WH).tocsc()
        solve = kkt_solver(G, lin.C, snap.transform, orderings=("MMD_AT_PLUS_A",), dense=False)
        f = np.r_[WH.T @ lin.r, -lin.c]
        objective += float(np.sum(lin.w * lin.r ** 2))
        if not diagonal:
            U = np.vstack([np.asarray(WH.T @ lin.A), lin.Cp])
            Y = solve(np.column_stack([f, U]))
            q += lin.A.T @ (lin.w * lin.r) - U.T @ Y[:, 0]
            sigma += lin.A.T @ (lin.w[:, None] * lin.A) - U.T @ Y[:, 1:]
            solutions.append(Y)
            continue
        y0 = solve(f)
        net, funcs, cons, key = term_model._variant(theta)
        h = funcs.evaluate(snap.vm, snap.va, snap.in_service)
        for a in range(0, n_t, COLUMN_CHUNK):
            cols = slice(a, min(a + COLUMN_CHUNK, n_t))
            A, Cp = term_model.columns(snap, net, funcs, cons, key, h, np.ones(h.size), cols)
            U = np.vstack([np.asarray(WH.T @ A), Cp])
            q[cols] += A.T @ (lin.w * lin.r) - U.T @ y0
            sigma[cols] += np.einsum("ij,ij->j", A, lin.w[:, None] * A) - np.einsum(
                "ij,ij->j", U, solve(U))
    if diagonal:
        return SchurTerms(q, sigma, objective, solutions)
    return SchurTerms(q, 0.5 * (sigma + sigma.T), objective, solutions)


def snapshot_transform(model: MeasurementModel, layout: StateLayout,
                       in_service: np.ndarray) -> sp.csr_matrix | None:
    """The change of variables that keeps bus couplers' gain matrices well conditioned."""
    return stiff_transform(model.network, layout, in_service)


def snapshot_residuals(term_model: TermModel, sample: list[SampleSnapshot],
                       theta: np.ndarray) -> np.ndarray:
    """Weighted residuals (z − h)/σ of every snapshot (snapshots × m, NaN where not used) at
    the snapshots' states and ``theta``."""
    out = np.full((len(sample), term_model.model.m), np.nan)
    for k, snap in enumerate(sample):
        lin = term_model.linearize(snap, theta, slice(0, 0))
        out[k, snap.rows] = lin.r * np.sqrt(lin.w)
    return out
