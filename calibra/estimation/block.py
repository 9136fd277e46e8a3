"""The block solver of the week engine: many snapshots of one topology iterated together
around one reference state (see :mod:`calibra.estimation.week` for the method)."""


from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd
import scipy.sparse as sp

from calibra.estimation.block_parts import (
    ANDERSON_DEPTH,
    BLOCK_TOLERANCE,
    CHORD_ITERATIONS,
    COLUMN_CHUNK_BYTES,
    MAX_WOODBURY,
    MIN_SPLIT,
    NUMERICAL_ERRORS,
    OUTCOME_COLUMNS,
    REFERENCE_BY_LOADING,
    Anderson,
    BlockResult,
    ColumnCache,
    MissingGroup,
    ReferenceSetup,
    converged_reason,
    describe_error,
    nearest_in_time,
    outcome_of,
    stack_blocks,
)
from calibra.estimation.block_updates import (
    factorize,
    factorize_reduced,
    newton_alone,
    pad_small_groups,
    woodbury,
)
from calibra.estimation.covariance import (
    DENSE_COVARIANCE_MAX,
    DENSE_INVERSE_MAX,
    kkt_solver,
    quadratic_diagonal,
    state_columns,
    stiff_transform,
)
from calibra.estimation.measurements import StateLayout, unit_phasors
from calibra.estimation.residuals import analyse_residuals
from calibra.estimation.wls import Estimator


class BlockSolver:
    """Solves many snapshots of one topology around one reference state together."""

    def __init__(self, estimator: Estimator, in_service: np.ndarray,
                 tolerance: float = BLOCK_TOLERANCE,
                 max_iterations: int = 40, partial: bool = False, statistics: bool = True):
        self.estimator = estimator
        self.model = estimator.model
        self.in_service = in_service
        self.tolerance = tolerance
        self.max_iterations = max_iterations
        #: Accept a reference that is not fully observable (a block inside an RTU outage):
        #: the block then estimates the observable islands of that reference.
        self.partial = partial
        #: False: states, residuals and objectives only, no residual covariance Ω (no dense
        #: state covariance: what screening probes need on a large network).
        self.statistics = statistics
        #: Set up at the reference state by each solve (None before).
        self.setup: ReferenceSetup | None = None
        # Per-solve working state of the block iteration.
        self._columns: ColumnCache | None = None
        self._cons_on: np.ndarray | None = None
        self._diverged: np.ndarray | None = None
        self._newton_last: dict[int, float] = {}
        self._states: tuple[np.ndarray, np.ndarray] | None = None
        self._small_woodbury = None

    # ------------------------------------------------------------------ public
    def solve(self, Z: np.ndarray, confidence: float = 0.99) -> BlockResult:
        """Estimate every row of Z (k × m, per unit, NaN = missing).

        A numerical failure of the block (a singular or badly conditioned iteration matrix)
        never ends the period: the block is split in halves, down to snapshots estimated one
        at a time, and each snapshot's outcome says how it was estimated.
        """
        try:
            return self._solve_block(Z, confidence)
        except NUMERICAL_ERRORS as exc:
            return self._split(Z, confidence, exc)

    def _split(self, Z: np.ndarray, confidence: float, exc: Exception) -> BlockResult:
        k = Z.shape[0]
        why = f"block iteration failed ({describe_error(exc)})"
        if k >= 2 * MIN_SPLIT:
            half = k // 2
            parts = [BlockSolver(self.estimator, self.in_service, self.tolerance,
                                 self.max_iterations, self.partial, self.statistics
                                 ).solve(Z[a:b], confidence)
                     for a, b in ((0, half), (half, k))]
            out = stack_blocks(parts)
            note = out.outcomes["method"] == "block"
            out.outcomes.loc[note, "reason"] = (out.outcomes.loc[note, "reason"].astype(str)
                                                + f"; in a half block after the {why}")
            return out
        out = self._empty(k, self.model.m, self.model.network.n_bus)
        rows = [self._single(i, Z[i], confidence, out) for i in range(k)]
        for r in rows:
            r["reason"] = f"{r['reason']}; alone after the {why}"
        return self._finish(out, rows)

    @staticmethod
    def _empty(k: int, m: int, n: int) -> BlockResult:
        return BlockResult(
            np.full((k, n), np.nan, np.float32), np.full((k, n), np.nan, np.float32),
            np.full((k, m), np.nan, np.float32), np.full((k, m), np.nan, np.float32),
            pd.DataFrame(),
        )

    def _finish(self, out: BlockResult, rows: list[dict]) -> BlockResult:
        out.outcomes = pd.DataFrame(rows, columns=OUTCOME_COLUMNS)
        res = out.residual.astype(float)
        used = np.isfinite(res)
        out.outcomes["n_used"] = used.sum(axis=1)
        out.outcomes["objective"] = np.where(used, res, 0.0) ** 2 @ (1.0 / self.model.sigma_pu ** 2)
        return out

    def _solve_block(self, Z: np.ndarray, confidence: float) -> BlockResult:
        model = self.model
        k, m = Z.shape
        n = model.network.n_bus
        avail = np.isfinite(Z)
        out = self._empty(k, m, n)
        rows: list[dict] = [{} for _ in range(k)]
        single = np.ones(k, bool)
        ref = self._reference(Z, avail)
        if ref is not None:
            obs = ref.observability
            avail = avail & obs.usable[None, :]
            self._prepare(ref, avail.any(axis=0))
            groups = self._groups(avail)
            blockable = [g for g in groups if g.factor is not None or g.missing.size == 0]
            for g in blockable:
                if g.unusable is not None:  # rows its lost part makes unusable
                    avail[np.ix_(g.members, self.setup.idx[g.unusable])] = False
            if blockable:
                done, iters = self._iterate(Z, avail, blockable, out)
                for g in blockable:
                    own = g.observability or obs
                    off = int(g.constraints_off.sum()) if g.constraints_off is not None else 0
                    free = int(2 * g.lost.sum()) if g.lost is not None else 0
                    for i in g.members[done[g.members]]:
                        single[i] = False
                        rows[i] = {"converged": True, "iterations": int(iters[i]),
                                   "method": "block", "reason": converged_reason(own),
                                   **outcome_of(own),
                                   "dof": int(avail[i].sum()) - (self.setup.nx - free)
                                   + (self.setup.cidx.size - off)}
                    # Gauss-Newton on its own matrix stalled too: say so (the single estimator
                    # would cost 1-2 s a snapshot in every pass; DEVELOPERS.md, PEGASE 1354).
                    for i in g.members[~done[g.members]]:
                        if i in self._newton_last:
                            single[i] = False
                            rows[i] = {"converged": False, "iterations": int(iters[i]),
                                       "method": "block", **outcome_of(own), "dof": 0,
                                       "reason": "no convergence (Gauss-Newton on the "
                                                 "snapshot's own matrix, last step "
                                                 f"{self._newton_last[i]:.2e})"}
                self._residuals(Z, avail, blockable, single, out)
        rest = np.flatnonzero(single)
        if not self.partial and rest.size >= 4:
            self._solve_partial_groups(Z, rest, confidence, out, rows, single)
        for i in np.flatnonzero(single):
            rows[i] = self._single(i, Z[i], confidence, out)
        return self._finish(out, rows)

    def _solve_partial_groups(self, Z, rest, confidence, out: BlockResult, rows, single) -> None:
        """Snapshots left out of the block, grouped by the measurements they systematically
        miss (an RTU outage), each group solved as a block of its own observable islands."""
        miss = ~np.isfinite(Z[rest])
        systematic = miss.mean(axis=0) >= 0.5
        keys = np.packbits(miss[:, systematic], axis=1) if systematic.any() else \
            np.zeros((rest.size, 1), np.uint8)
        _, inverse = np.unique(keys, axis=0, return_inverse=True)
        for g in np.unique(inverse.ravel()):
            members = rest[inverse.ravel() == g]
            if members.size < 4:
                continue
            sub = BlockSolver(self.estimator, self.in_service, self.tolerance, self.max_iterations,
                              partial=True, statistics=self.statistics
                              ).solve(Z[members], confidence)
            ok = sub.outcomes["method"].to_numpy() == "block"
            for j in np.flatnonzero(ok):
                i = members[j]
                single[i] = False
                out.vm[i], out.va[i] = sub.vm[j], sub.va[j]
                out.residual[i], out.omega[i] = sub.residual[j], sub.omega[j]
                rows[i] = {c: sub.outcomes.iloc[j][c] for c in OUTCOME_COLUMNS}

    # ------------------------------------------------------------------ set-up
    def _reference(self, Z: np.ndarray, avail: np.ndarray):
        """A converged snapshot of the block (most measurements first) that estimates what
        the block's measurements together can: every observable island of the block's
        pattern (parts of a network may be unobservable: that is normal). In a partial block
        (an RTU outage) the most complete converged snapshot."""
        base = avail.any(axis=0)
        if not base.any():
            return None
        whole = self.estimator.observability(base, self.in_service)
        if whole.n_islands == 0:
            return None
        # The block iterates around the reference's operating point: the snapshot nearest the
        # middle of the block. It only sets the iteration matrix and the islands, so its few
        # missing values are taken from the nearest snapshots in time: it then estimates
        # every island of the block's pattern, although with sparse metering nearly every
        # snapshot misses some meter the islands need. (A partial block, without filling:
        # the most complete snapshots, nearest the middle first.)
        count = avail.sum(axis=1)
        middle = np.abs(np.arange(len(count)) - (len(count) - 1) / 2)
        if REFERENCE_BY_LOADING:
            a = np.abs(Z)
            seen = np.isfinite(a)
            level = np.where(seen, a, 0.0).sum(axis=1) / np.maximum(seen.sum(axis=1), 1)
            middle = np.abs(level - np.median(level))
        order = np.argsort(middle, kind="stable") if not self.partial else \
            np.lexsort((middle, -count))
        filled = nearest_in_time(Z) if not self.partial else Z
        for cand in order[:5]:
            # The block's tolerance is enough for a reference.
            est = self.estimator.estimate(filled[cand], None, self.in_service,
                                          tolerance=max(self.tolerance, 1e-8))
            if est.converged and (self.partial or est.observability.covers(whole)):
                return est
        return None

    def _prepare(self, ref, base: np.ndarray) -> None:
        """Iteration matrix K₀ at the reference state, K₀⁻¹'s state columns and Ωᵢᵢ of the
        base set."""
        model, in_service = self.model, self.in_service
        funcs, cons = model.functions, model.constraints
        layout: StateLayout = ref.layout
        nx = layout.n_state
        cidx = np.flatnonzero(ref.constraints_used)
        nc = cidx.size
        idx = np.flatnonzero(base)
        var = model.sigma_pu[idx] ** 2
        H0 = funcs.jacobian(ref.vm, ref.va, layout, in_service)[idx].tocsr()
        G0 = (H0.T @ sp.diags(1.0 / var) @ H0).tocsc()
        C0 = cons.jacobian(ref.vm, ref.va, layout, in_service)[cidx]
        # Bus couplers make G₀ badly conditioned (near-parallel columns): work in variables
        # that separate their stiff differences (x = T x'), K₀⁻¹ = T_f K₀'⁻¹ T_fᵀ.
        T = stiff_transform(model.network, layout, in_service)
        Gn, Cn = (G0, sp.csr_matrix(C0)) if T is None else \
            ((T.T @ G0 @ T).tocsc(), sp.csr_matrix(C0) @ T)
        solve_k0 = kkt_solver(G0, C0, T)
        # A dense copy makes row access cheap; only when it stays small.
        H0_dense = H0.toarray() if idx.size * nx <= 5_000_000 else None
        setup = ReferenceSetup(ref, layout, idx, cidx, nx, var, H0, sp.csr_matrix(C0), H0_dense,
                               G0.diagonal(), T, solve_k0)
        if not self.statistics:
            self.setup = setup
            return
        # Ωᵢᵢ = Rᵢᵢ − H₀ᵢ P H₀ᵢᵀ over the base list from the state covariance P (K₀⁻¹'s state
        # block, dense, once per block); the Woodbury updates need only solves with K₀.
        # P and M (K₀⁻¹'s state columns) are kept in the variables of the stiff transform,
        # x = T x': P = T P' Tᵀ, so H P Hᵀ = (H T) P' (H T)ᵀ.
        cols = state_columns(Gn, Cn) if DENSE_INVERSE_MAX < nx <= DENSE_COVARIANCE_MAX \
            else None
        if cols is None:
            E = np.zeros((nx + nc, nx))
            E[np.arange(nx), np.arange(nx)] = 1.0
            K0_state = kkt_solver(Gn, Cn)(E) if T is not None else solve_k0(E)
            cols = (np.ascontiguousarray(K0_state[:nx]), K0_state[nx:])
        # K₀⁻¹[Hᵢᵀ; 0] for a missing row i is then a sum of a few columns of P and M: far
        # cheaper than a solve.
        P, Mt = cols[0], np.ascontiguousarray(cols[1].T)
        Hn = H0 if T is None else (H0 @ T).tocsr()
        self.setup = replace(setup, P=P, Mt=Mt, Hn=Hn,
                             omega_diag=var - quadratic_diagonal(Hn, P))

    def _groups(self, avail: np.ndarray) -> list[MissingGroup]:
        """Group snapshots by the base measurements they miss; factorize each Ωₘₘ.

        Groups with the same number of missing measurements are factorized together (stacked
        small matrices), which matters when most snapshots miss one or two samples.
        """
        idx = self.setup.idx
        miss = ~avail[:, idx]
        keys = np.ascontiguousarray(np.packbits(miss, axis=1))
        keys = keys.view(np.dtype((np.void, keys.shape[1]))).ravel()
        _, first, inverse = np.unique(keys, return_index=True, return_inverse=True)
        inverse = inverse.ravel()
        order = np.argsort(inverse, kind="stable")
        bounds = np.searchsorted(inverse[order], np.arange(first.size + 1))
        sets = [np.flatnonzero(miss[f]) for f in first]
        groups = [MissingGroup(order[bounds[g]:bounds[g + 1]], sets[g], None, self.setup.omega_diag)
                  for g in range(first.size)]
        by_size: dict[int, list[int]] = {}
        for g, mset in enumerate(sets):
            if 0 < mset.size <= MAX_WOODBURY:
                by_size.setdefault(mset.size, []).append(g)
        # Consecutive snapshots miss many of the same values (a gap, an outage): K₀⁻¹[Hᵢᵀ; 0]
        # is solved once per missing row of the block, not once per snapshot.
        wanted = [sets[g] for ms in by_size.values() for g in ms]
        self._columns = ColumnCache(self._k0_columns, np.unique(np.concatenate(wanted))
                                     if wanted else np.zeros(0, np.int64))
        for size, members in by_size.items():
            # Batches small enough that the stacked Ω rows stay a few tens of MB.
            batch = max(1, 4_000_000 // (size * max(idx.size, 1)))
            for start in range(0, len(members), batch):
                chunk = members[start:start + batch]
                factorize(self, np.stack([sets[g] for g in chunk]), [groups[g] for g in chunk])
        for g in groups:
            if g.factor is None and 0 < g.missing.size <= MAX_WOODBURY:
                factorize_reduced(self, g)
        return groups

    def _keeps_islands(self, missing: np.ndarray) -> bool:
        """Whether the block's pattern without the base rows ``missing`` estimates every bus
        of the block in as many islands."""
        avail = np.zeros(self.model.m, bool)
        setup = self.setup
        avail[setup.idx] = True
        avail[setup.idx[missing]] = False
        return self.estimator.observability(avail, self.in_service).covers(
            setup.ref.observability)

    def _k0_columns(self, rows: np.ndarray) -> np.ndarray:
        """K₀⁻¹[H₀ᵣᵀ; 0] ((nx + nc) × |rows|): from the sparse rows and K₀⁻¹'s state columns
        when the block has them (a few nonzeros per row), else by solves."""
        if self.setup.P is None:
            h = self._H0_rows(rows)
            return self.setup.solve_k0(np.vstack([h.T,
                                                  np.zeros((self.setup.cidx.size, rows.size))]))
        h = self.setup.Hn[rows]
        qx = np.asarray(h @ self.setup.P).T
        if self.setup.stiff is not None:
            qx = np.asarray(self.setup.stiff @ qx)
        return np.vstack([qx, np.asarray(h @ self.setup.Mt).T])

    def _H0_rows(self, rows: np.ndarray) -> np.ndarray:
        if self.setup.H0_dense is not None:
            return self.setup.H0_dense[rows]
        return self.setup.H0[rows].toarray()

    # ------------------------------------------------------------------ block iteration
    def _iterate(self, Z: np.ndarray, avail: np.ndarray, groups: list[MissingGroup],
                 out: BlockResult):
        model = self.model
        nc = self.setup.cidx.size
        ref = self.setup.ref
        k = Z.shape[0]
        inv_var = 1.0 / model.sigma_pu ** 2
        group_of = np.full(k, -1, np.int64)
        for gi, g in enumerate(groups):
            group_of[g.members] = gi
        W = np.ascontiguousarray(np.where(avail, inv_var, 0.0).T)
        Zt = np.ascontiguousarray(np.where(avail, Z, 0.0).T)
        vm = np.repeat(ref.vm[:, None], k, axis=1)
        va = np.repeat(ref.va[:, None], k, axis=1)
        lost = ~ref.observability.estimated_buses
        vm[lost], va[lost] = 1.0, 0.0
        lam = np.zeros((nc, k))
        done = np.zeros(k, bool)
        iters = np.zeros(k, np.int64)
        # Constraints a snapshot drops (its pattern leaves their buses unobservable).
        self._cons_on = np.ones((nc, k), bool)
        for g in groups:
            if g.constraints_off is not None:
                self._cons_on[np.ix_(g.constraints_off, g.members)] = False

        pad_small_groups(self, k, groups)
        members = np.flatnonzero(group_of >= 0)
        self._diverged = np.zeros(k, bool)
        self._newton_last = {}
        # Snapshots are independent: on a large network they go through in column chunks.
        width = max(8, COLUMN_CHUNK_BYTES // (16 * max(model.m, len(model.network.buses))))
        for c0 in range(0, members.size, width):
            self._iterate_columns(members[c0:c0 + width], group_of, groups, Zt, W, vm, va, lam,
                                  done, iters)
        # What the fixed matrix does not bring to convergence (an operating point far from
        # the reference's, stiff couplers whose Jacobian turns with it) is finished by
        # Gauss-Newton on the snapshot's own matrix.
        for i in members[~done[members]]:
            newton_alone(self, int(i), groups[group_of[i]], Zt, W, vm, va, lam, done, iters)
        vm[lost], va[lost] = np.nan, np.nan
        for g in groups:
            if g.lost is not None:
                vm[np.ix_(g.lost, g.members)] = np.nan
                va[np.ix_(g.lost, g.members)] = np.nan
        ok = np.flatnonzero(done)
        out.vm[ok], out.va[ok] = vm[:, ok].T, va[:, ok].T
        self._states = (vm, va)  # float64, for residuals
        return done, iters

    def _iterate_columns(self, cols, group_of, groups, Zt, W, vm, va, lam, done, iters):
        """The fixed-matrix iteration for the snapshots ``cols`` (results written back into
        vm, va, lam, done and iters). The chunk works on its own contiguous copies, from which
        converged columns are dropped, so an iteration indexes nothing."""
        model, in_service, layout = self.model, self.in_service, self.setup.layout
        funcs, cons = model.functions, model.constraints
        nx, cidx = self.setup.nx, self.setup.cidx
        nc = cidx.size
        live = np.asarray(cols)  # snapshots still iterating, in the order of the local arrays
        z, w = Zt[:, live], W[:, live]
        x_vm, x_va, x_lam = vm[:, live], va[:, live], lam[:, live]
        on = self._cons_on[:, live]
        dropped = not on.all()
        accel = Anderson(nx + nc, live.size, ANDERSON_DEPTH)
        for _ in range(min(self.max_iterations, CHORD_ITERATIONS)):
            if live.size == 0:
                break
            phasors = unit_phasors(x_va)
            _, rhs = funcs.evaluate_with_gradient(x_vm, x_va, layout, in_service, (z, w), phasors)
            if nc:
                lam_rows = np.zeros((cons.m, live.size))
                lam_rows[cidx] = x_lam
                c, c_grad = cons.evaluate_with_gradient(x_vm, x_va, layout, in_service, lam_rows,
                                                        phasors)
                c = -c[cidx]
                if dropped:
                    c[~on] = 0.0
                rhs = np.vstack([rhs - c_grad, c])
            sol = self.setup.solve_k0(rhs)
            woodbury(self, sol, live, group_of, groups)
            step = np.abs(sol[:nx]).max(axis=0)
            sol = accel.step(sol, nx)
            if nc:
                x_lam += sol[nx:]
                if dropped:
                    x_lam[~on] = 0.0
            x_vm, x_va = layout.apply_step(x_vm, x_va, sol[:nx])
            iters[live] += 1
            finished = step < self.tolerance
            stay = ~finished & (np.isfinite(step) & (step <= 10.0))
            done[live[finished]] = True
            if not stay.all():
                leave = ~stay
                gone = live[leave]
                self._diverged[live[leave & ~finished]] = True
                vm[:, gone], va[:, gone], lam[:, gone] = x_vm[:, leave], x_va[:, leave], \
                    x_lam[:, leave]
                live = live[stay]
                z, w, on = z[:, stay], w[:, stay], on[:, stay]
                x_vm, x_va, x_lam = x_vm[:, stay], x_va[:, stay], x_lam[:, stay]
                accel.keep(stay)
        vm[:, live], va[:, live], lam[:, live] = x_vm, x_va, x_lam

    def _group_omega(self, g: MissingGroup, avail: np.ndarray) -> np.ndarray | None:
        """Ωᵢᵢ of snapshots of group ``g`` (``avail``: their rows × m; NaN where not
        available); None without statistics."""
        if not self.statistics:
            return None
        full = np.full(self.model.m, np.nan)
        full[self.setup.idx] = g.omega_diag
        return np.where(avail, full, np.nan)

    def _residuals(self, Z, avail, groups, single, out: BlockResult) -> None:
        model = self.model
        ok = np.flatnonzero(~single)
        if ok.size == 0:
            return
        vm = self._states[0][:, ok]
        va = self._states[1][:, ok]
        h = model.functions.evaluate(np.nan_to_num(vm, nan=1.0), np.nan_to_num(va),
                                     self.in_service).T
        out.residual[ok] = np.where(avail[ok], Z[ok] - h, np.nan)
        if not self.statistics:
            return
        for g in groups:
            mem = g.members[~single[g.members]]
            if mem.size:
                out.omega[mem] = self._group_omega(g, avail[mem])

    # ------------------------------------------------------------------ fallback
    def _single(self, i: int, z: np.ndarray, confidence: float, out: BlockResult) -> dict:
        try:
            est = self.estimator.estimate(z, None, self.in_service, tolerance=self.tolerance)
        except NUMERICAL_ERRORS as exc:
            return {"converged": False, "iterations": 0, "method": "single",
                    "reason": f"estimate failed: {describe_error(exc)}", "observable": False,
                    "islands": 0, "buses_not_estimated": self.model.network.n_bus, "dof": 0}
        row = {"converged": est.converged, "iterations": est.iterations, "method": "single",
               "reason": est.reason, **outcome_of(est.observability), "dof": est.dof}
        if est.converged:
            try:
                omega = analyse_residuals(self.estimator, est, confidence).omega_diag \
                    if self.statistics else np.full(self.model.m, np.nan)
            except NUMERICAL_ERRORS as exc:
                row.update(converged=False,
                           reason=f"residual analysis failed: {describe_error(exc)}")
                return row
            out.vm[i], out.va[i] = est.vm, est.va
            out.residual[i] = est.residual
            out.omega[i] = omega
        return row


