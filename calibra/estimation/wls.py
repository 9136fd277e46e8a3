"""AC weighted-least-squares state estimation of one snapshot by Gauss-Newton.

Zero-injection buses are held as exact equality constraints with Hachtel's augmented matrix
(Gjelsvik, Aam & Holten, IEEE Trans. PAS-104(11), 1985; Alvarado & Tinney, IEEE Trans. Power
Systems 5(3), 1990 — cited from memory), factorized sparse at every iteration::

    [ αI   H̃   0  ] [ ρ  ]   [ Δz̃ ]
    [ H̃ᵀ   0   Cᵀ ] [ Δx ] = [ 0  ]        H̃ = W^½ H,  Δz̃ = W^½ (z − h(x))
    [ 0    C   0  ] [ μ  ]   [ −c ]

No heavy weights are used, so the matrix stays well conditioned. An optional Huber
M-estimator (Huber 1964, from memory) reweights measurements by iteratively reweighted least
squares, so that a few gross errors in one snapshot do not smear the estimate.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from calibra.estimation.measurement_model import MeasurementModel
from calibra.estimation.measurements import V_MAG, MeasurementFunctions, StateLayout
from calibra.estimation.observability import (
    Observability,
    ObservabilityStructure,
    structure_for,
)
from calibra.model.network import branch_status

_VM_RANGE = (0.3, 2.0)
_MAX_STEP = 0.5  #: largest state change (pu or rad) in one iteration


@dataclass
class EstimatorOptions:
    """Convergence control and the robust option."""

    tolerance: float = 1e-8  #: largest state update (pu / rad) accepted as converged
    max_iterations: int = 40
    robust: bool = False
    #: Huber threshold in standard deviations; 1.5 is the usual choice (from memory).
    huber_k: float = 1.5


@dataclass
class SnapshotEstimate:
    """The estimate of one snapshot, with what is needed for residual analysis.

    Arrays of length m are in the order of the measurement model; entries of measurements not
    used (missing, or touching an unobservable bus) are NaN in ``residual``.
    """

    vm: np.ndarray
    va: np.ndarray
    converged: bool
    iterations: int
    reason: str
    used: np.ndarray
    weights: np.ndarray
    h: np.ndarray
    residual: np.ndarray
    objective: float
    dof: int
    observability: Observability
    layout: StateLayout
    constraints_used: np.ndarray
    constraint_mismatch: float
    in_service: np.ndarray
    jacobian: sp.csr_matrix | None = field(default=None, repr=False)
    constraint_jacobian: sp.csr_matrix | None = field(default=None, repr=False)



class Estimator:
    """WLS estimator bound to one measurement model; caches per measurement pattern."""

    def __init__(self, model: MeasurementModel, options: EstimatorOptions | None = None):
        self.model = model
        self.options = options or EstimatorOptions()
        self._obs_cache: dict[bytes, Observability] = {}
        self._structure_cache: dict[bytes, ObservabilityStructure] = {}
        self._default_status = model.network.default_in_service()

    # ------------------------------------------------------------------ observability
    def observability(self, available: np.ndarray, in_service: np.ndarray) -> Observability:
        """Observable islands of a measurement pattern (cached per topology and pattern)."""
        available = np.asarray(available, bool)
        in_service = branch_status(in_service)
        key = np.packbits(available).tobytes() + np.packbits(in_service).tobytes()
        obs = self._obs_cache.get(key)
        if obs is None:
            obs = self.observability_structure(in_service).analyse(
                available, self.model.network.reference_position)
            if len(self._obs_cache) > 4096:
                self._obs_cache.clear()
            self._obs_cache[key] = obs
        return obs

    def observability_structure(self, in_service: np.ndarray) -> ObservabilityStructure:
        """The structural rows of the model for one topology (cached)."""
        in_service = branch_status(in_service)
        skey = np.packbits(in_service).tobytes()
        structure = self._structure_cache.get(skey)
        if structure is None:
            if len(self._structure_cache) > 32:
                self._structure_cache.clear()
            structure = self._structure_cache[skey] = structure_for(
                self.model.functions, self.model.constraints, in_service)
        return structure

    # ------------------------------------------------------------------ one snapshot
    def estimate(
        self,
        z: np.ndarray,
        available: np.ndarray | None = None,
        in_service: np.ndarray | None = None,
        start: tuple[np.ndarray, np.ndarray] | None = None,
        keep_jacobian: bool = True,
        tolerance: float | None = None,
    ) -> SnapshotEstimate:
        """Estimate the state from measurements ``z`` in per unit (NaN = missing);
        ``tolerance`` overrides the options' largest state update accepted as converged."""
        model, opt = self.model, self.options
        tol = opt.tolerance if tolerance is None else tolerance
        net = model.network
        n = net.n_bus
        z = np.asarray(z, float)
        avail = np.isfinite(z)
        if available is not None:
            avail &= np.asarray(available, bool)
        in_service = self._default_status if in_service is None else np.asarray(in_service)
        obs = self.observability(avail, in_service)
        layout = StateLayout.build(n, obs.references, obs.estimated_buses)
        lost = ~obs.estimated_buses
        used = avail & obs.usable
        cons = model.constraints
        cons_used = obs.constraints_usable if cons.m else np.zeros(0, bool)

        if start is not None:
            vm, va = np.array(start[0], float), np.array(start[1], float)
            bad = ~np.isfinite(vm) | ~np.isfinite(va)
            vm[bad], va[bad] = 1.0, 0.0
        else:
            vm, va = self._flat_start(z, used)
        for ref in obs.references:
            if start is None:
                va[ref] = 0.0

        idx = np.flatnonzero(used)
        cidx = np.flatnonzero(cons_used)
        sigma = model.sigma_pu[idx]
        weights = np.ones(model.m)
        w_used = np.ones(idx.size)
        converged, reason, it = False, "", 0
        H = C = system = None
        # Large models: the first steps on the (far smaller) constrained normal equations,
        # the last ones on the augmented matrix, whose accuracy decides the converged state.
        normal, stiff = model.m >= NORMAL_MIN_MEASUREMENTS, False
        step = last_step = np.inf
        if layout.n_state == 0 or idx.size == 0:
            reason = "no observable part: " + obs.reason
        else:
            z0 = np.where(used, z, 0.0)
            inv_sigma = np.where(used, 1.0 / model.sigma_pu, 0.0)
            objective_before = np.inf
            previous = None
            history: list[float] = []
            steps: list[float] = []
            for it in range(1, opt.max_iterations + 1):
                r = z0 - model.functions.evaluate(vm, va, in_service)
                objective_now = float(np.sum((r[idx] / sigma) ** 2 * w_used))
                # Damped Gauss-Newton: once the zero injections hold, a step that raised J is
                # halved (up to four times); near a flat direction plain steps can cycle.
                # (While they do not hold yet, J may rightly rise towards them.)
                halvings = 0
                feasible = _violation(cons, cidx, vm, va, in_service) < FEASIBLE
                while (previous is not None and not opt.robust and halvings < 4 and feasible
                       and objective_now > objective_before * (1 + OVERSHOOT)):
                    dx_prev = previous[2] * 0.5
                    vm, va = layout.apply_step(previous[0], previous[1], dx_prev)
                    previous = (previous[0], previous[1], dx_prev)
                    r = z0 - model.functions.evaluate(vm, va, in_service)
                    objective_now = float(np.sum((r[idx] / sigma) ** 2 * w_used))
                    halvings += 1
                history.append(objective_now)
                if feasible and objective_stationary(steps, history):
                    converged = True
                    break
                objective_before = objective_now
                if opt.robust and it > 1:
                    w_used = _huber_weights(r[idx] / sigma, opt.huber_k)
                    weights[idx] = w_used
                H = model.functions.jacobian_triplets(vm, va, layout, in_service)
                C = _constraint_rows(cons, cidx, vm, va, layout, in_service)
                c = cons.evaluate(vm, va, in_service)[cidx] if cidx.size else np.zeros(0)
                dx = None
                if normal and last_step > NORMAL_UNTIL:
                    dx, stiff = _normal_step(H, C, weights * inv_sigma ** 2, r, c, layout,
                                             stiff, net, in_service)
                    normal = dx is not None
                if dx is None:
                    if system is None:
                        system = _AugmentedSystem(H, C, model.m, layout.n_state, cidx.size)
                    try:
                        dx = system.solve(H, C, np.sqrt(weights) * inv_sigma, r, c)
                    except RuntimeError as exc:
                        reason = f"gain matrix singular at iteration {it}: {exc}"
                        break
                step = float(np.abs(dx).max())
                if np.isfinite(step) and step > _MAX_STEP:
                    # Far from the solution (gross errors, a poor start): limit the step.
                    dx = dx * (_MAX_STEP / step)
                previous = (vm, va, dx)
                steps.append(step)
                vm, va = layout.apply_step(vm, va, dx)
                if not np.isfinite(step) or vm[obs.estimated_buses].min() < _VM_RANGE[0] \
                        or vm[obs.estimated_buses].max() > _VM_RANGE[1]:
                    reason = f"diverged at iteration {it} (voltage out of range)"
                    break
                # Converged, or stalled at round-off level (gross errors can leave the last
                # steps hovering just above the tolerance).
                stalled = it >= 10 and step < 100 * tol and step >= 0.5 * last_step
                if (step < tol or stalled) and (not opt.robust or it > 2):
                    converged = True
                    break
                last_step = step
            else:
                reason = f"no convergence in {opt.max_iterations} iterations (last step {step:.2e})"
        if converged:
            reason = "converged"
            if not obs.observable:
                reason += " on the observable part; " + obs.reason

        h_all = model.functions.evaluate(vm, va, in_service)
        residual = np.full(model.m, np.nan)
        residual[idx] = z[idx] - h_all[idx]
        objective = float(np.sum((residual[idx] / model.sigma_pu[idx]) ** 2))
        mismatch = float(np.abs(cons.evaluate(vm, va, in_service)[cidx]).max()) \
            if cidx.size else 0.0
        if converged and keep_jacobian:
            # The Jacobian at the converged state, restricted to the rows used.
            H = model.functions.jacobian(vm, va, layout, in_service)[idx]
            C = cons.jacobian(vm, va, layout, in_service)[cidx]
        else:
            H = C = None
        vm_out, va_out = vm.copy(), va.copy()
        vm_out[lost], va_out[lost] = np.nan, np.nan
        return SnapshotEstimate(
            vm=vm_out, va=va_out, converged=converged, iterations=it, reason=reason, used=used,
            weights=weights, h=h_all, residual=residual, objective=objective,
            dof=int(idx.size - layout.n_state + cidx.size), observability=obs, layout=layout,
            constraints_used=cons_used, constraint_mismatch=mismatch, in_service=in_service,
            jacobian=H if keep_jacobian else None,
            constraint_jacobian=C if keep_jacobian else None,
        )

    def _flat_start(self, z: np.ndarray, used: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Flat angles; magnitudes at the median measured voltage (robust to a bad voltage
        meter, e.g. one off by √3), else 1.0."""
        model = self.model
        n = model.network.n_bus
        vmeas = used & (model.code == V_MAG)
        level = float(np.median(z[vmeas])) if vmeas.any() else 1.0
        return np.full(n, level if 0.8 < level < 1.2 else 1.0), np.zeros(n)


#: A Gauss-Newton run whose steps have shrunk below this (pu, rad) while J no longer changes
#: (relative 1e-9) has converged in everything the measurements say: what still moves is a
#: direction they hardly see, e.g. the sign of a low flow seen through a current magnitude.
FLAT_STEP = 1e-4
FLAT_OBJECTIVE = 1e-9
FLAT_CYCLE = 1e-6


#: Largest zero-injection mismatch (pu) at which steps are judged by J alone.
FEASIBLE = 1e-9
#: A step that raises J by more than this share overshot (steps towards the exact zero
#: injections may raise J by less: their multipliers can be large).
OVERSHOOT = 1e-6


def _violation(cons: MeasurementFunctions, cidx: np.ndarray, vm, va, in_service) -> float:
    if cidx.size == 0:
        return 0.0
    return float(np.abs(cons.evaluate(vm, va, in_service)[cidx]).max())


def objective_stationary(steps: list[float], objectives: list[float]) -> bool:
    """Whether a Gauss-Newton run may stop although its step is above the tolerance: after
    five iterations the steps are small (:data:`FLAT_STEP`) and no longer shrink fast, and J
    no longer changes — from one iteration to the next, or, when the steps cycle in a flat
    direction, the best of the last three no better than the best of the three before.
    ``steps``: the step of every iteration so far; ``objectives``: J at every iterate."""
    if len(steps) < 6 or len(objectives) < 2:
        return False
    last, before = steps[-1], steps[-2]
    if last >= FLAT_STEP or last < 0.25 * before:
        return False  # not small yet, or still converging quadratically
    now, prev = objectives[-1], objectives[-2]
    if abs(prev - now) <= FLAT_OBJECTIVE * max(now, 1.0):
        return True
    # A cycle: the steps stopped shrinking and J stays within a narrow band (a steady
    # linear approach, whose steps keep shrinking, is not one).
    if len(objectives) >= 8 and last >= 0.9 * min(steps[-6:-1]):
        recent = objectives[-6:]
        return max(recent) - min(recent) <= FLAT_CYCLE * max(now, 1.0)
    return False


#: Models with at least this many measurements take their first Gauss-Newton steps on the
#: constrained normal equations [[HᵀWH, Cᵀ], [C, 0]] (PEGASE 2869, 18,586 points: 20 ms a
#: factorization against 0.5 s for the augmented matrix of every measurement) …
NORMAL_MIN_MEASUREMENTS = 3000
#: … until a step is below this (pu, rad); the augmented matrix then finishes the iteration.
NORMAL_UNTIL = 1e-3


def _normal_step(H, C, w: np.ndarray, r: np.ndarray, c: np.ndarray, layout: StateLayout,
                 stiff, network, in_service: np.ndarray):
    """Gauss-Newton step from the constrained normal equations (in the variables of the stiff
    transform where bus couplers are in the state); (None, …) when it fails numerically.
    ``stiff``: the transform (False: not built yet), returned for the next step."""
    from calibra.estimation.covariance import kkt_solver, stiff_transform

    nx = layout.n_state
    hr, hc, hv = H
    Hm = sp.csr_matrix((hv, (hr, hc)), shape=(r.size, nx))
    Cm = sp.csr_matrix((C[2], (C[0], C[1])), shape=(c.size, nx))
    G = (Hm.T @ sp.diags(w) @ Hm).tocsc()
    if stiff is False:
        stiff = stiff_transform(network, layout, in_service)
    rhs = np.r_[Hm.T @ (w * r), -c]
    try:
        sol = kkt_solver(G, Cm, stiff, orderings=("MMD_AT_PLUS_A",), dense=False)(rhs)
    except (RuntimeError, ValueError, np.linalg.LinAlgError):
        return None, stiff
    dx = np.asarray(sol[:nx], float)
    return (dx if np.all(np.isfinite(dx)) else None), stiff


def _huber_weights(u: np.ndarray, k: float) -> np.ndarray:
    a = np.abs(u)
    return np.where(a <= k, 1.0, k / np.maximum(a, 1e-300))


def _constraint_rows(cons: MeasurementFunctions, cidx: np.ndarray, vm, va, layout, in_service):
    """Triplets of the constraint Jacobian for the constraints in use, renumbered 0..len-1."""
    if cidx.size == 0:
        return np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0)
    r, c, v = cons.jacobian_triplets(vm, va, layout, in_service)
    new_row = np.full(cons.m, -1, np.int64)
    new_row[cidx] = np.arange(cidx.size)
    keep = new_row[r] >= 0
    return new_row[r[keep]], c[keep], v[keep]


class _AugmentedSystem:
    """Hachtel's augmented matrix with a sparsity pattern fixed for one state layout.

    The (row, column) pattern of H and C is identical at every iteration, so the compressed
    column structure is computed once and only the values are refreshed.
    """

    def __init__(self, H, C, m: int, nx: int, nc: int):
        hr, hc, _ = H
        cr, cc, _ = C
        self.m, self.nx, self.nc = m, nx, nc
        self.hr, self.hc = hr, hc
        diag = np.arange(m)
        rows = np.concatenate([diag, hr, m + hc, m + cc, m + nx + cr])
        cols = np.concatenate([diag, m + hc, hr, m + nx + cr, m + cc])
        size = m + nx + nc
        order = np.lexsort((rows, cols))
        self.order = order
        self.indices = rows[order].astype(np.int32)
        self.indptr = np.searchsorted(cols[order], np.arange(size + 1)).astype(np.int32)
        self.size = size

    def solve(self, H, C, sqrt_w: np.ndarray, r: np.ndarray, c: np.ndarray) -> np.ndarray:
        """Gauss-Newton step Δx; rows with zero weight (missing) stay as zero rows of H̃."""
        m, nx = self.m, self.nx
        hv = H[2] * sqrt_w[self.hr]
        cv = C[2]
        # α near the smallest column norm of H̃ balances the blocks (Björck's scaling idea).
        col_norm = np.sqrt(np.bincount(self.hc, hv ** 2, minlength=nx))
        positive = col_norm > 0
        alpha = 0.5 * float(col_norm[positive].min()) if positive.any() else 1.0
        vals = np.concatenate([np.full(m, alpha), hv, hv, cv, cv])[self.order]
        K = sp.csc_matrix((vals, self.indices, self.indptr), shape=(self.size, self.size))
        rhs = np.concatenate([sqrt_w * r, np.zeros(nx), -c])
        try:
            lu = spla.splu(K, permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.01,
                           options={"SymmetricMode": True})
        except RuntimeError as exc:  # "Factor is exactly singular"
            raise RuntimeError(str(exc)) from None
        sol = lu.solve(rhs)
        if not np.all(np.isfinite(sol)):
            raise RuntimeError("non-finite solution")
        return sol[m:m + nx]
