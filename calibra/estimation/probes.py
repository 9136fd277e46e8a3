"""Probe estimates: a few snapshots estimated again with sets of points left out.

The screening decides which suspect to set aside by the objective J(x̂) the probe snapshots
reach without it. Every probe snapshot is first brought to its own WLS solution with the
points set aside so far (Gauss-Newton on its own matrix, from the screening's estimate), and
its matrix K = [[HᵀWH, Cᵀ], [C, 0]] factorized there once. Leaving out a set U of points is
then an exact low-rank (Woodbury) update of K, and each trial iterates from that solution to the
exact WLS solution without U: K_U⁻¹b = K⁻¹b + Q Ω_UU⁻¹ Qᵀb with Q = K⁻¹[H_Uᵀ; 0] and
Ω_UU = R_U − H_U P H_Uᵀ, the residual covariance of U. All trials of one snapshot iterate
together as columns. This replaces a fresh estimate per trial and snapshot.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from calibra.estimation.covariance import kkt_solver, stiff_transform
from calibra.estimation.measurements import StateLayout, unit_phasors
from calibra.estimation.wls import Estimator

#: Column ordering for a probe snapshot's matrix (one factorization, no search).
_ORDERING = ("MMD_AT_PLUS_A",)
_MAX_STEP = 0.5  #: largest state change (pu, rad) of one Gauss-Newton step
_NEWTON_ITERATIONS = 30
_TRIAL_ITERATIONS = 30


@dataclass
class _Probe:
    """One probe snapshot at its WLS solution with the points left out so far."""

    z: np.ndarray  # measurements (m), 0 where not used
    w: np.ndarray  # weights 1/σ² of the used rows (m), 0 elsewhere
    in_service: np.ndarray
    layout: StateLayout
    cidx: np.ndarray  # constraints in use
    vm: np.ndarray
    va: np.ndarray
    lam: np.ndarray
    solve: object  # B ↦ K⁻¹B at the solution
    H: sp.csr_matrix  # Jacobian at the solution (all m rows)
    objective: float


class ProbeSet:
    """Probe snapshots ``z`` (k × m, per unit, NaN = missing) with the points ``left_out``,
    each started from ``starts[j]`` (vm, va) when given (else estimated from scratch)."""

    def __init__(self, estimator: Estimator, z: np.ndarray, in_service: np.ndarray,
                 left_out: np.ndarray, starts: list | None = None, tolerance: float = 1e-6):
        self.estimator = estimator
        self.model = estimator.model
        self.tolerance = tolerance
        self.left_out = np.asarray(left_out, bool)
        self.probes: list[_Probe | None] = []
        for j, zj in enumerate(np.asarray(z, float)):
            start = starts[j] if starts is not None else None
            self.probes.append(self._settle(zj, np.asarray(in_service[j]), start))

    # ------------------------------------------------------------------ the base solution
    def _settle(self, z: np.ndarray, in_service: np.ndarray, start) -> _Probe | None:
        est, model = self.estimator, self.model
        avail = np.isfinite(z) & ~self.left_out
        obs = est.observability(avail, in_service)
        if obs.n_islands == 0:
            return None
        layout = StateLayout.build(model.network.n_bus, obs.references, obs.estimated_buses)
        used = avail & obs.usable
        cidx = np.flatnonzero(obs.constraints_usable) if model.constraints.m else \
            np.zeros(0, np.int64)
        if start is None or not np.isfinite(start[0][obs.estimated_buses]).all():
            first = est.estimate(np.where(used, z, np.nan), None, in_service, keep_jacobian=False,
                                 tolerance=self.tolerance)
            if not first.converged:
                return None
            start = (first.vm, first.va)
        vm = np.where(np.isfinite(start[0]), start[0], 1.0)[:, None].astype(float)
        va = np.where(np.isfinite(start[1]), start[1], 0.0)[:, None].astype(float)
        zz = np.where(used, z, 0.0)[:, None]
        w = np.where(used, 1.0 / model.sigma_pu ** 2, 0.0)[:, None]
        lam = np.zeros((cidx.size, 1))
        T = stiff_transform(model.network, layout, in_service)
        for _ in range(_NEWTON_ITERATIONS):
            H, solve = self._factor(vm, va, w, in_service, layout, cidx, T)
            rhs = self._gradient(vm, va, lam, zz, w, in_service, layout, cidx)
            sol = solve(rhs)
            step = float(np.abs(sol[:layout.n_state]).max())
            if not np.isfinite(step):
                return None
            if step > _MAX_STEP:
                sol *= _MAX_STEP / step
            vm, va, lam = self._apply(vm, va, lam, sol, layout)
            if step < self.tolerance:
                H, solve = self._factor(vm, va, w, in_service, layout, cidx, T)
                h = model.functions.evaluate(vm, va, in_service)
                objective = float(np.sum(w * (zz - h) ** 2))
                return _Probe(zz[:, 0], w[:, 0], in_service, layout, cidx, vm, va, lam, solve, H,
                              objective)
        return None

    def _factor(self, vm, va, w, in_service, layout, cidx, T):
        funcs, cons = self.model.functions, self.model.constraints
        H = funcs.jacobian(vm[:, 0], va[:, 0], layout, in_service).tocsr()
        G = (H.T @ sp.diags(w[:, 0]) @ H).tocsc()
        C = cons.jacobian(vm[:, 0], va[:, 0], layout, in_service)[cidx] if cidx.size else \
            sp.csr_matrix((0, layout.n_state))
        return H, kkt_solver(G, C, T, None, _ORDERING, dense=False)

    def _gradient(self, vm, va, lam, z, w, in_service, layout, cidx) -> np.ndarray:
        funcs, cons = self.model.functions, self.model.constraints
        phasors = unit_phasors(va)
        _, rhs = funcs.evaluate_with_gradient(vm, va, layout, in_service, (z, w), phasors)
        if cidx.size:
            lam_rows = np.zeros((cons.m, vm.shape[1]))
            lam_rows[cidx] = lam
            c, c_grad = cons.evaluate_with_gradient(vm, va, layout, in_service, lam_rows, phasors)
            rhs = np.vstack([rhs - c_grad, -c[cidx]])
        return rhs

    @staticmethod
    def _apply(vm, va, lam, sol, layout):
        nx = layout.n_state
        vm, va = layout.apply_step(vm, va, sol[:nx])
        return vm, va, lam + sol[nx:]

    # ------------------------------------------------------------------ correlations
    def correlation(self, i: int, omega: np.ndarray) -> np.ndarray | None:
        """Correlation of point i's residual with every point's at the first probe snapshot
        that uses it: Ωᵢⱼ = −Hⱼ P Hᵢᵀ from one solve with its matrix, normalized by the
        residual variances ``omega`` (per point, e.g. the block estimate's at that
        snapshot). NaN where a point is not used; None when no probe uses i."""
        for p in self.probes:
            if p is None or p.w[i] <= 0:
                continue
            nx = p.layout.n_state
            hi = p.H[i].toarray().ravel()
            q = p.solve(np.r_[hi, np.zeros(p.cidx.size)])[:nx]
            row = -np.asarray(p.H @ q).ravel()
            row[i] += 1.0 / p.w[i]
            out = np.full(row.size, np.nan)
            used = p.w > 0
            with np.errstate(divide="ignore", invalid="ignore"):
                out[used] = row[used] / np.sqrt(omega[i] * omega[used])
            return out
        return None

    # ------------------------------------------------------------------ trials
    def objectives(self, trials: list[np.ndarray]) -> list[float]:
        """Σ J(x̂) over the probe snapshots for each trial (points left out besides
        ``left_out``); a snapshot whose estimate fails counts as the worst one seen."""
        n_trial = len(trials)
        total = np.zeros(n_trial)
        failed = np.zeros(n_trial, np.int64)
        for probe in self.probes:
            if probe is None:
                failed += 1
                continue
            j, ok = self._trials(probe, trials)
            total += np.where(ok, j, 0.0)
            failed += ~ok
        k = len(self.probes)
        return [float(t * (1 + f / max(k - f, 1))) if f < k else np.inf
                for t, f in zip(total, failed, strict=True)]

    def _trials(self, p: _Probe, trials: list[np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
        """J of every trial for one probe snapshot (and whether it converged)."""
        nx = p.layout.n_state
        n_trial = len(trials)
        rows = [np.flatnonzero(np.asarray(t, bool) & (p.w > 0)) for t in trials]
        W = np.repeat(p.w[:, None], n_trial, axis=1)
        updates = []
        ok = np.ones(n_trial, bool)
        sigma2 = 1.0 / np.maximum(p.w, 1e-300)
        for c, u in enumerate(rows):
            W[u, c] = 0.0
            if u.size == 0:
                updates.append(None)
                continue
            hu = p.H[u].toarray()
            Q = p.solve(np.vstack([hu.T, np.zeros((p.cidx.size, u.size))]))
            omega = np.diag(sigma2[u]) - hu @ Q[:nx]
            try:
                factor = np.linalg.inv(omega)
            except np.linalg.LinAlgError:
                ok[c] = False
                updates.append(None)
                continue
            if not np.isfinite(factor).all():
                ok[c] = False
                updates.append(None)
                continue
            updates.append((hu, Q, factor))
        z = np.repeat(p.z[:, None], n_trial, axis=1)
        vm = np.repeat(p.vm, n_trial, axis=1)
        va = np.repeat(p.va, n_trial, axis=1)
        lam = np.repeat(p.lam, n_trial, axis=1)
        live = ok.copy()
        for _ in range(_TRIAL_ITERATIONS):
            cols = np.flatnonzero(live)
            if cols.size == 0:
                break
            rhs = self._gradient(vm[:, cols], va[:, cols], lam[:, cols], z[:, cols], W[:, cols],
                                 p.in_service, p.layout, p.cidx)
            sol = p.solve(rhs)
            for k, c in enumerate(cols):
                if updates[c] is not None:
                    hu, Q, factor = updates[c]
                    sol[:, k] += Q @ (factor @ (hu @ sol[:nx, k]))
            step = np.abs(sol[:nx]).max(axis=0)
            vm[:, cols], va[:, cols] = p.layout.apply_step(vm[:, cols], va[:, cols], sol[:nx])
            lam[:, cols] += sol[nx:]
            bad = ~np.isfinite(step) | (step > 10.0)
            ok[cols[bad]] = False
            live[cols[bad | (step < self.tolerance)]] = False
        ok &= ~live  # still iterating after the budget: not converged
        h = self.model.functions.evaluate(vm, va, p.in_service)
        objective = np.sum(W * (z - h) ** 2, axis=0)
        return objective, ok
