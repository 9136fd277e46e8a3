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
from calibra.model.parameters import NetworkParameter, admittance_derivative, with_parameters


class MeterError(StrEnum):
    """A constant error of one meter over the sample."""

    SCALE = "scale"  #: measured = (1 + β) × true
    OFFSET = "offset"  #: measured = true + β (per unit)


@dataclass(frozen=True)
class MeterTerm:
    """A constant error of the meter in row ``row`` of the measurement model."""

    row: int
    kind: MeterError


Term = NetworkParameter | MeterTerm


def parameter_column(funcs: MeasurementFunctions, network: Network, parameter: NetworkParameter,
                     vm: np.ndarray, va: np.ndarray, in_service: np.ndarray) -> np.ndarray:
    """∂h/∂p of every row of ``funcs`` at one state (vectors of length n), analytic from the
    branch admittances' derivative (:func:`calibra.model.parameters.admittance_derivative`):
    dI = dY·V at the terminals the parameter touches, dS = V_bus·conj(dI), d|I| = Re(conj(I)dI)/|I|.
    Zero when the branch is out of service."""
    dY = admittance_derivative(network, parameter)
    tm = funcs.terminals
    V = vm * np.exp(1j * va)
    dI = np.zeros(len(tm.kind), complex)
    if parameter.on_bus:
        b = int(network.bus_positions([parameter.element])[0])
        dI[(tm.kind == 2) & (tm.element == b)] = dY[0] * V[b]
    else:
        e = int(network.branch_positions([parameter.element])[0])
        if not in_service[e]:
            return np.zeros(funcs.m)
        adm = network.branch_admittances(in_service)
        f, t = adm.f[e], adm.t[e]
        from_end = dY[0] * V[f] + dY[1] * V[t]
        to_end = dY[2] * V[f] + dY[3] * V[t]
        dI[(tm.kind == 0) & (tm.element == e)] = from_end
        dI[(tm.kind == 1) & (tm.element == e)] = to_end
        dI[(tm.kind == 2) & (tm.element == f)] += from_end
        dI[(tm.kind == 2) & (tm.element == t)] += to_end
    dS = V[tm.bus] * np.conj(dI)
    col = np.zeros(funcs.m)
    term = funcs.terminal_of
    code = funcs.code
    p_rows = np.flatnonzero(np.isin(code, (P_FLOW, P_INJ)))
    q_rows = np.flatnonzero(np.isin(code, (Q_FLOW, Q_INJ)))
    col[p_rows] = dS[term[p_rows]].real
    col[q_rows] = dS[term[q_rows]].imag
    i_rows = np.flatnonzero((code == I_MAG) & (np.abs(dI[np.maximum(term, 0)]) > 0))
    if i_rows.size:
        y = funcs.entry_admittances(in_service)
        current = np.zeros(len(tm.kind), complex)
        np.add.at(current, tm.entry_row, y * V[tm.entry_col])
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


class TermModel:
    """h(x, θ), its Jacobians and the constraints for a list of terms on one measurement model."""

    def __init__(self, model: MeasurementModel, terms: list[Term]):
        self.model = model
        self.terms = list(terms)
        self.network_terms = [i for i, t in enumerate(self.terms)
                              if isinstance(t, NetworkParameter)]

    def linearize(self, snap: SampleSnapshot, theta: np.ndarray) -> Linearized:
        model = self.model
        values = {self.terms[i]: float(theta[i]) for i in self.network_terms}
        net = with_parameters(model.network, values) if values else model.network
        funcs = model.functions.on_network(net) if values else model.functions
        cons = model.constraints.on_network(net) if values else model.constraints
        vm, va, ins = snap.vm, snap.va, snap.in_service
        h = funcs.evaluate(vm, va, ins)
        gain = np.ones(model.m)
        bias = np.zeros(model.m)
        for i, term in enumerate(self.terms):
            if isinstance(term, MeterTerm):
                if term.kind == MeterError.SCALE:
                    gain[term.row] *= 1.0 + theta[i]
                else:
                    bias[term.row] += theta[i]
        rows, crow = snap.rows, snap.constraint_rows
        r = snap.z[rows] - (gain * h + bias)[rows]
        H = sp.diags(gain[rows]) @ funcs.jacobian(vm, va, snap.layout, ins)[rows]
        A = np.zeros((rows.size, len(self.terms)))
        Cp = np.zeros((crow.size, len(self.terms)))
        for i, term in enumerate(self.terms):
            if isinstance(term, NetworkParameter):
                A[:, i] = (gain * parameter_column(funcs, net, term, vm, va, ins))[rows]
                if crow.size:
                    Cp[:, i] = parameter_column(cons, net, term, vm, va, ins)[crow]
            else:
                at = np.flatnonzero(rows == term.row)
                if at.size:
                    A[at, i] = h[term.row] if term.kind == MeterError.SCALE else 1.0
        C = cons.jacobian(vm, va, snap.layout, ins)[crow] if crow.size else \
            sp.csr_matrix((0, snap.layout.n_state))
        c = cons.evaluate(vm, va, ins)[crow] if crow.size else np.zeros(0)
        w = 1.0 / model.sigma_pu[rows] ** 2
        return Linearized(r, w, sp.csr_matrix(H), A, sp.csr_matrix(C), c, Cp)


@dataclass
class SchurTerms:
    """The Schur complement on the terms over a sample, and what a step needs."""

    q: np.ndarray  # terms
    sigma: np.ndarray  # terms × terms
    objective: float  # Σ rᵀWr at the linearization point
    solutions: list[np.ndarray]  # per snapshot: K⁻¹[f, U] (state and multiplier rows)


def schur_terms(term_model: TermModel, sample: list[SampleSnapshot], theta: np.ndarray,
                extra: list[np.ndarray] | None = None) -> SchurTerms:
    """Σ, q and each snapshot's K_k⁻¹[f_k, U_k] at the snapshots' states and ``theta``."""
    n_t = len(term_model.terms)
    q = np.zeros(n_t)
    sigma = np.zeros((n_t, n_t))
    objective = 0.0
    solutions = []
    for snap in sample:
        lin = term_model.linearize(snap, theta)
        WH = sp.diags(lin.w) @ lin.H
        G = (lin.H.T @ WH).tocsc()
        solve = kkt_solver(G, lin.C, snap.transform, orderings=("MMD_AT_PLUS_A",), dense=False)
        f = np.r_[WH.T @ lin.r, -lin.c]
        U = np.vstack([np.asarray(WH.T @ lin.A), lin.Cp])
        Y = solve(np.column_stack([f, U]))
        q += lin.A.T @ (lin.w * lin.r) - U.T @ Y[:, 0]
        sigma += lin.A.T @ (lin.w[:, None] * lin.A) - U.T @ Y[:, 1:]
        objective += float(np.sum(lin.w * lin.r ** 2))
        solutions.append(Y)
    return SchurTerms(q, 0.5 * (sigma + sigma.T), objective, solutions)


def snapshot_transform(model: MeasurementModel, layout: StateLayout,
                       in_service: np.ndarray) -> sp.csr_matrix | None:
    """The change of variables that keeps bus couplers' gain matrices well conditioned."""
    return stiff_transform(model.network, layout, in_service)
