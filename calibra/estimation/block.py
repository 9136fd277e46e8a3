"""The block solver of the week engine: many snapshots of one topology iterated together
around one reference state (see :mod:`calibra.estimation.week` for the method)."""


from __future__ import annotations

import numpy as np
import pandas as pd
import scipy.linalg as la
import scipy.sparse as sp

from calibra.estimation.block_parts import (
    ANDERSON_DEPTH,
    BLOCK_TOLERANCE,
    CHORD_ITERATIONS,
    CLEAR_PIVOT,
    COLUMN_CHUNK_BYTES,
    CONTRACTION,
    MAX_NEWTON_STEP,
    MAX_WOODBURY,
    MIN_SPLIT,
    NEWTON_PATIENCE,
    NUMERICAL_ERRORS,
    ORDERINGS_ALONE,
    OUTCOME_COLUMNS,
    REFERENCE_BY_LOADING,
    REFRESH_ALONE,
    SMALL_MISSING,
    Anderson,
    BlockResult,
    ColumnCache,
    MissingGroup,
    SmallWoodbury,
    converged_reason,
    describe_error,
    downdated,
    nearest_in_time,
    outcome_of,
    stack_blocks,
    woodbury_rank,
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
from calibra.estimation.residuals import CRITICAL_S, analyse_residuals
from calibra.estimation.wls import FEASIBLE, OVERSHOOT, Estimator, objective_stationary


class BlockSolver:
    """Solves many snapshots of one topology around one reference state together."""

    def __init__(self, estimator: Estimator, status: np.ndarray,
                 tolerance: float = BLOCK_TOLERANCE,
                 max_iterations: int = 40, partial: bool = False, statistics: bool = True):
        self.estimator = estimator
        self.model = estimator.model
        self.status = status
        self.tolerance = tolerance
        self.max_iterations = max_iterations
        #: Accept a reference that is not fully observable (a block inside an RTU outage):
        #: the block then estimates the observable islands of that reference.
        self.partial = partial
        #: False: states, residuals and objectives only, no residual covariance Ω (no dense
        #: state covariance: what screening probes need on a large network).
        self.statistics = statistics

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
            parts = [BlockSolver(self.estimator, self.status, self.tolerance,
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
                    avail[np.ix_(g.members, self._idx[g.unusable])] = False
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
                                   "dof": int(avail[i].sum()) - (self._nx - free)
                                   + (self._cidx.size - off)}
                    # Gauss-Newton on its own matrix did not converge either: the single
                    # estimator would not do better (the same iteration); say so.
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
            sub = BlockSolver(self.estimator, self.status, self.tolerance, self.max_iterations,
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
        whole = self.estimator.observability(base, self.status)
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
            est = self.estimator.estimate(filled[cand], None, self.status,
                                          tolerance=max(self.tolerance, 1e-8))
            if est.converged and (self.partial or est.observability.covers(whole)):
                return est
        return None

    def _prepare(self, ref, base: np.ndarray) -> None:
        """Iteration matrix K₀ at the reference state, K₀⁻¹'s state columns and Ωᵢᵢ of the
        base set."""
        model, status = self.model, self.status
        funcs, cons = model.functions, model.constraints
        layout: StateLayout = ref.layout
        nx = layout.n_state
        cidx = np.flatnonzero(ref.constraints_used)
        nc = cidx.size
        idx = np.flatnonzero(base)
        var = model.sigma_pu[idx] ** 2
        H0 = funcs.jacobian(ref.vm, ref.va, layout, status)[idx].tocsr()
        G0 = (H0.T @ sp.diags(1.0 / var) @ H0).tocsc()
        C0 = cons.jacobian(ref.vm, ref.va, layout, status)[cidx]
        # Bus couplers make G₀ badly conditioned (near-parallel columns): work in variables
        # that separate their stiff differences (x = T x'), K₀⁻¹ = T_f K₀'⁻¹ T_fᵀ.
        T = self._stiff = stiff_transform(model.network, layout, status)
        Gn, Cn = (G0, sp.csr_matrix(C0)) if T is None else \
            ((T.T @ G0 @ T).tocsc(), sp.csr_matrix(C0) @ T)
        self._solve_k0 = kkt_solver(G0, C0, T)
        self._H0 = H0
        self._C0 = sp.csr_matrix(C0)
        self._g0_diag = G0.diagonal()
        # A dense copy makes row access cheap; only when it stays small.
        self._H0_dense = H0.toarray() if idx.size * nx <= 5_000_000 else None
        self._var = var
        self._idx = idx
        self._layout, self._cidx, self._nx, self._ref = layout, cidx, nx, ref
        self._omega_diag = self._P = self._Mt = None
        if not self.statistics:
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
            K0_state = kkt_solver(Gn, Cn)(E) if T is not None else self._solve_k0(E)
            cols = (np.ascontiguousarray(K0_state[:nx]), K0_state[nx:])
        # K₀⁻¹[Hᵢᵀ; 0] for a missing row i is then a sum of a few columns of P and M: far
        # cheaper than a solve.
        self._P, self._Mt = cols[0], np.ascontiguousarray(cols[1].T)
        self._Hn = H0 if T is None else (H0 @ T).tocsr()
        self._omega_diag = var - quadratic_diagonal(self._Hn, self._P)

    def _groups(self, avail: np.ndarray) -> list[MissingGroup]:
        """Group snapshots by the base measurements they miss; factorize each Ωₘₘ.

        Groups with the same number of missing measurements are factorized together (stacked
        small matrices), which matters when most snapshots miss one or two samples.
        """
        idx = self._idx
        miss = ~avail[:, idx]
        keys = np.ascontiguousarray(np.packbits(miss, axis=1))
        keys = keys.view(np.dtype((np.void, keys.shape[1]))).ravel()
        _, first, inverse = np.unique(keys, return_index=True, return_inverse=True)
        inverse = inverse.ravel()
        order = np.argsort(inverse, kind="stable")
        bounds = np.searchsorted(inverse[order], np.arange(first.size + 1))
        sets = [np.flatnonzero(miss[f]) for f in first]
        groups = [MissingGroup(order[bounds[g]:bounds[g + 1]], sets[g], None, self._omega_diag)
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
                self._factorize(np.stack([sets[g] for g in chunk]), [groups[g] for g in chunk])
        for g in groups:
            if g.factor is None and 0 < g.missing.size <= MAX_WOODBURY:
                self._factorize_reduced(g)
        return groups

    def _keeps_islands(self, missing: np.ndarray) -> bool:
        """Whether the block's pattern without the base rows ``missing`` estimates every bus
        of the block in as many islands."""
        avail = np.zeros(self.model.m, bool)
        avail[self._idx] = True
        avail[self._idx[missing]] = False
        return self.estimator.observability(avail, self.status).covers(self._ref.observability)

    def _factorize_reduced(self, g: MissingGroup) -> None:
        """A missing set that leaves part of the block's islands unobservable (a meter that
        alone ties a bus or an island): the snapshots keep what their own pattern observes.

        K₀ becomes K_s by a low-rank update U C Uᵀ: rows removed (M and the rows the lost part
        makes unusable: [Hᵢᵀ; 0], C = −1/σᵢ²), constraints removed (λⱼ decoupled: columns
        [Cⱼᵀ; 0] and eⱼ, C = [[0, −1], [−1, 1]]), and every state the pattern leaves free held
        (lost buses, the angle reference of each new island: eₛ, C = G₀ₛₛ). The free states
        then appear in no row left, so the held values change nothing else: the iteration
        converges to the exact estimate of the observable part, and Woodbury gives K_s⁻¹
        from K₀⁻¹ with the capacitance −(C⁻¹ + UᵀK₀⁻¹U)."""
        model, idx, ref = self.model, self._idx, self._ref
        layout, nx, nc = self._layout, self._nx, self._cidx.size
        avail = np.zeros(model.m, bool)
        avail[idx] = True
        avail[idx[g.missing]] = False
        obs = self.estimator.observability(avail, self.status)
        if obs.n_islands == 0:
            return
        unusable = np.flatnonzero(~obs.usable[idx] & avail[idx])
        removed = np.union1d(g.missing, unusable)
        if removed.size > MAX_WOODBURY:
            return
        off = ~obs.constraints_usable[self._cidx]
        lost = ref.observability.estimated_buses & ~obs.estimated_buses
        pins = [layout.magnitude_column[lost], layout.angle_column[lost]]
        block_refs = set(ref.observability.references.tolist())
        for r in obs.references:
            members = np.flatnonzero(obs.island == obs.island[r])
            if not block_refs.intersection(members.tolist()):
                pins.append(layout.angle_column[[r]])
        pins = np.unique(np.concatenate(pins))
        pins = pins[pins >= 0]
        dim = nx + nc
        h_rows = self._H0_rows(removed)
        cons_rows = np.flatnonzero(off)
        C0 = self._C0
        blocks = [np.hstack([h_rows, np.zeros((removed.size, nc))])]
        cinv = [np.diag(-self._var[removed])]
        for j in cons_rows:
            pair = np.zeros((2, dim))
            pair[0, :nx] = C0[j].toarray().ravel()
            pair[1, nx + j] = 1.0
            blocks.append(pair)
            cinv.append(np.array([[-1.0, -1.0], [-1.0, 0.0]]))
        if pins.size:
            e = np.zeros((pins.size, dim))
            e[np.arange(pins.size), pins] = 1.0
            blocks.append(e)
            cinv.append(np.diag(1.0 / np.maximum(self._g0_diag[pins], 1e-12)))
        Ut = np.vstack(blocks)  # r × dim
        Q = np.empty((dim, Ut.shape[0]))  # K₀⁻¹U
        Q[:, :removed.size] = self._columns.get(removed)
        if Ut.shape[0] > removed.size:
            Q[:, removed.size:] = self._solve_k0(np.ascontiguousarray(Ut[removed.size:].T))
        cap = -(la.block_diag(*cinv) + Ut @ Q)
        d = 1.0 / np.sqrt(np.maximum(np.abs(np.diag(cap)), 1e-300))
        scaled = cap * d[:, None] * d[None, :]
        try:
            inv = np.linalg.inv(scaled)
        except np.linalg.LinAlgError:
            return
        # A capacitance that is singular after all (the pattern loses more than the test
        # said) shows in its inverse: refuse it rather than iterate with it.
        if not np.isfinite(inv).all() or np.abs(inv).max() > 1e10:
            return
        factor = inv * d[:, None] * d[None, :]
        g.factor, g.h_missing, g.q_missing = factor, Ut, Q
        g.observability, g.unusable, g.constraints_off, g.lost = obs, unusable, off, lost
        g.pins = pins
        if self.statistics:
            g.omega_diag = downdated(self._omega_diag, -np.asarray(self._H0 @ Q[:nx]).T,
                                      factor)

    def _factorize(self, M: np.ndarray, groups: list[MissingGroup]) -> None:
        """Ωₘₘ⁻¹ and the updated Ωᵢᵢ for groups with equally many missing measurements
        (M: one row of base positions per group); a group whose Ωₘₘ is singular (removing M
        leaves the snapshot unobservable) keeps ``factor`` None."""
        G, size = M.shape
        union, pos = np.unique(M, return_inverse=True)
        pos = pos.reshape(M.shape)
        # K₀⁻¹[Hᵤᵀ; 0] by solves with the missing rows U (a few sparse solves cost far less
        # than products with the dense covariance on a large network).
        h_union = self._H0_rows(union)
        q_union = self._columns.get(union)
        om_uu = np.diag(self._var[union]) - h_union @ q_union[:self._nx]
        om_mm = om_uu[pos[:, :, None], pos[:, None, :]]
        om_ma = None
        if self.statistics:  # rows of Ω over the base list: Rδ − H₀ K₀⁻¹[Hᵤᵀ; 0]
            rows_u = -np.asarray(self._H0 @ q_union[:self._nx]).T
            rows_u[np.arange(union.size), union] += self._var[union]
            om_ma = rows_u[pos]  # (G, size, base)
        scale = np.sqrt(self._var[M])
        S = om_mm / scale[:, :, None] / scale[:, None, :]
        try:
            L = np.linalg.cholesky(S)
            ok = np.ones(G, bool)
        except np.linalg.LinAlgError:
            L = np.zeros_like(S)
            ok = np.zeros(G, bool)
            for g in range(G):
                try:
                    L[g] = np.linalg.cholesky(S[g])
                    ok[g] = True
                except np.linalg.LinAlgError:
                    pass
        diag_l = np.diagonal(L, axis1=1, axis2=2)
        ok &= diag_l.min(axis=1) ** 2 >= CRITICAL_S
        # A small pivot may be a meter that alone ties part of the block's islands: decided
        # by the observability test, not by the size of a rounding error.
        for g in np.flatnonzero(ok & (diag_l.min(axis=1) ** 2 < CLEAR_PIVOT)):
            ok[g] = self._keeps_islands(M[g])
        sel = np.flatnonzero(ok)
        if sel.size == 0:
            return
        Linv = np.linalg.inv(L[sel])
        inv = np.einsum("gqp,gqr->gpr", Linv, Linv)  # (LLᵀ)⁻¹ = L⁻ᵀL⁻¹
        inv = inv / scale[sel][:, :, None] / scale[sel][:, None, :]
        for j, g in enumerate(sel):
            mset = M[g]
            grp = groups[g]
            grp.factor = inv[j]
            grp.h_missing = np.hstack([h_union[pos[g]], np.zeros((mset.size, self._cidx.size))])
            grp.q_missing = q_union[:, pos[g]]
            if om_ma is not None:
                grp.omega_diag = downdated(self._omega_diag, om_ma[g], inv[j])

    def _k0_columns(self, rows: np.ndarray) -> np.ndarray:
        """K₀⁻¹[H₀ᵣᵀ; 0] ((nx + nc) × |rows|): from the sparse rows and K₀⁻¹'s state columns
        when the block has them (a few nonzeros per row), else by solves."""
        if self._P is None:
            h = self._H0_rows(rows)
            return self._solve_k0(np.vstack([h.T, np.zeros((self._cidx.size, rows.size))]))
        h = self._Hn[rows]
        qx = np.asarray(h @ self._P).T
        if self._stiff is not None:
            qx = np.asarray(self._stiff @ qx)
        return np.vstack([qx, np.asarray(h @ self._Mt).T])

    def _H0_rows(self, rows: np.ndarray) -> np.ndarray:
        if self._H0_dense is not None:
            return self._H0_dense[rows]
        return self._H0[rows].toarray()

    # ------------------------------------------------------------------ block iteration
    def _iterate(self, Z: np.ndarray, avail: np.ndarray, groups: list[MissingGroup],
                 out: BlockResult):
        model = self.model
        nc = self._cidx.size
        ref = self._ref
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

        self._pad_small_groups(k, groups)
        members = np.flatnonzero(group_of >= 0)
        self._diverged = np.zeros(k, bool)
        self._newton_last: dict[int, float] = {}
        # Snapshots are independent: on a large network they go through in column chunks.
        width = max(8, COLUMN_CHUNK_BYTES // (16 * max(model.m, len(model.network.buses))))
        for c0 in range(0, members.size, width):
            self._iterate_columns(members[c0:c0 + width], group_of, groups, Zt, W, vm, va, lam,
                                  done, iters)
        # What the fixed matrix does not bring to convergence (an operating point far from
        # the reference's, stiff couplers whose Jacobian turns with it) is finished by
        # Gauss-Newton on the snapshot's own matrix.
        for i in members[~done[members]]:
            self._newton_alone(int(i), groups[group_of[i]], Zt, W, vm, va, lam, done, iters)
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
        model, status, layout = self.model, self.status, self._layout
        funcs, cons = model.functions, model.constraints
        nx, cidx = self._nx, self._cidx
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
            _, rhs = funcs.evaluate_with_gradient(x_vm, x_va, status, layout, (z, w), phasors)
            if nc:
                lam_rows = np.zeros((cons.m, live.size))
                lam_rows[cidx] = x_lam
                c, c_grad = cons.evaluate_with_gradient(x_vm, x_va, status, layout, lam_rows,
                                                        phasors)
                c = -c[cidx]
                if dropped:
                    c[~on] = 0.0
                rhs = np.vstack([rhs - c_grad, c])
            sol = self._solve_k0(rhs)
            self._woodbury(sol, live, group_of, groups)
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

    def _newton_alone(self, i: int, g: MissingGroup, Zt, W, vm, va, lam, done, iters) -> None:
        """Gauss-Newton for snapshot i on its own matrix (its weights, the constraints it keeps,
        the states its pattern leaves free held), from its last iterate or, when the block
        iteration ran away, from the reference state."""
        model, status, layout = self.model, self.status, self._layout
        funcs, cons = model.functions, model.constraints
        nx, cidx = self._nx, self._cidx
        nc = cidx.size
        ref = self._ref
        z, w = Zt[:, i:i + 1], W[:, i:i + 1]
        if self._diverged[i]:
            x_vm, x_va, x_lam = ref.vm[:, None].copy(), ref.va[:, None].copy(), \
                np.zeros((nc, 1))
            x_vm[~ref.observability.estimated_buses] = 1.0
            x_va[~ref.observability.estimated_buses] = 0.0
        else:
            x_vm, x_va, x_lam = vm[:, [i]].copy(), va[:, [i]].copy(), lam[:, [i]].copy()
        on = self._cons_on[:, i]
        off = np.flatnonzero(~on)
        pins = g.pins if g.pins is not None else np.zeros(0, np.int64)
        hold = sp.csr_matrix((self._g0_diag[pins] if pins.size else np.zeros(0),
                              (pins, pins)), shape=(nx, nx))
        D = sp.csr_matrix((np.ones(off.size), (off, off)), shape=(nc, nc)) if nc else None
        keep = sp.diags(on.astype(float)) if nc else None
        last = best = step = objective_before = np.inf
        stuck = uses = 0
        solver = None
        previous = None
        history: list[float] = []
        steps: list[float] = []
        for it in range(1, self.max_iterations + 1):
            phasors = unit_phasors(x_va)
            h, rhs = funcs.evaluate_with_gradient(x_vm, x_va, status, layout, (z, w), phasors)
            objective = float(np.sum(w * (z - h) ** 2))
            # Damped: a step that raised J is halved (up to four times), as the single
            # estimator does.
            halvings = 0
            feasible = not nc or float(np.abs(cons.evaluate(x_vm, x_va, status)[cidx][on]).max(
                initial=0.0)) < FEASIBLE
            while previous is not None and halvings < 4 and feasible and \
                    objective > objective_before * (1 + OVERSHOOT):
                p_vm, p_va, p_lam, p_sol = previous
                p_sol = p_sol * 0.5
                previous = (p_vm, p_va, p_lam, p_sol)
                x_vm, x_va = layout.apply_step(p_vm, p_va, p_sol[:nx])
                x_lam = (p_lam + p_sol[nx:]) * on[:, None] if nc else p_lam
                phasors = unit_phasors(x_va)
                h, rhs = funcs.evaluate_with_gradient(x_vm, x_va, status, layout, (z, w),
                                                      phasors)
                objective = float(np.sum(w * (z - h) ** 2))
                halvings += 1
            history.append(objective)
            if feasible and objective_stationary(steps, history):
                done[i] = True
                break
            objective_before = objective
            if nc:
                lam_rows = np.zeros((cons.m, 1))
                lam_rows[cidx] = x_lam * on[:, None]
                c, c_grad = cons.evaluate_with_gradient(x_vm, x_va, status, layout, lam_rows,
                                                        phasors)
                c = -c[cidx]
                c[off] = 0.0
                rhs = np.vstack([rhs - c_grad, c])
            # The matrix is refactorized while the steps shrink slowly; once they contract
            # fast it is kept (the right-hand side is exact, so the fixed point is the same).
            if solver is None or uses >= REFRESH_ALONE or not step < CONTRACTION * last:
                H = funcs.jacobian(x_vm[:, 0], x_va[:, 0], layout, status)
                G = (H.T @ sp.diags(w[:, 0]) @ H + hold).tocsc()
                C = keep @ cons.jacobian(x_vm[:, 0], x_va[:, 0], layout, status)[cidx] if nc \
                    else sp.csr_matrix((0, nx))
                try:
                    solver = kkt_solver(G, C, self._stiff, D, ORDERINGS_ALONE, dense=False)
                except NUMERICAL_ERRORS:
                    break
                uses = 0
            try:
                sol = solver(rhs)
            except NUMERICAL_ERRORS:
                break
            uses += 1
            step = float(np.abs(sol[:nx]).max())
            if not np.isfinite(step):
                break
            if step > MAX_NEWTON_STEP:
                sol = sol * (MAX_NEWTON_STEP / step)
            previous = (x_vm, x_va, x_lam, sol)
            steps.append(step)
            if nc:
                x_lam = (x_lam + sol[nx:]) * on[:, None]
            x_vm, x_va = layout.apply_step(x_vm, x_va, sol[:nx])
            iters[i] += 1
            # Converged, or stalled at round-off level (as the single estimator accepts).
            if step < self.tolerance or (it >= 10 and step < 100 * self.tolerance
                                         and step >= 0.5 * last):
                done[i] = True
                break
            # No progress for many steps (a gross error the iteration cycles around).
            stuck = 0 if step < 0.5 * best else stuck + 1
            best = min(best, step)
            if stuck >= NEWTON_PATIENCE:
                break
            last = step
        if not done[i]:
            self._newton_last[i] = step
        vm[:, [i]], va[:, [i]], lam[:, [i]] = x_vm, x_va, x_lam

    def _woodbury(self, sol: np.ndarray, active: np.ndarray, group_of: np.ndarray,
                  groups: list[MissingGroup]) -> None:
        """Turn K₀⁻¹b into K_s⁻¹b for snapshots missing measurements M (in place).

        K_s = K₀ − Uₘ Wₘ Uₘᵀ; the Woodbury capacitance Rₘ − Hₘ P Hₘᵀ is Ωₘₘ. Snapshots that
        miss only a few measurements (the usual case: a dropped sample) are updated together
        from padded per-snapshot arrays; larger sets group by group.
        """
        small = self._small_woodbury
        if small is not None:
            pos = small.position[active]
            cols = np.flatnonzero(pos >= 0)
            if cols.size:
                p = pos[cols]
                t = np.einsum("kpn,nk->kp", small.h[p], sol[:, cols])
                t = np.einsum("kpq,kq->kp", small.f[p], t)
                sol[:, cols] += np.einsum("dkp,kp->dk", small.q[:, p], t)
        gids = group_of[active]
        for gi in np.unique(gids):
            g = groups[gi]
            if g.factor is None or woodbury_rank(g) <= SMALL_MISSING:
                continue
            cols = np.flatnonzero(gids == gi)
            sol[:, cols] += g.q_missing @ (g.factor @ (g.h_missing @ sol[:, cols]))

    def _pad_small_groups(self, k: int, groups: list[MissingGroup]) -> None:
        """Per-snapshot padded Hₘ, Ωₘₘ⁻¹ and K₀⁻¹Uₘ for the groups with few missing
        measurements (zero padding leaves the update unchanged)."""
        small = [g for g in groups if g.factor is not None and woodbury_rank(g) <= SMALL_MISSING]
        if not small:
            self._small_woodbury = None
            return
        width = max(woodbury_rank(g) for g in small)
        dim = self._nx + self._cidx.size
        h = np.zeros((len(small), width, dim))
        f = np.zeros((len(small), width, width))
        q = np.zeros((dim, len(small), width))
        position = np.full(k, -1, np.int64)
        for j, g in enumerate(small):
            w = woodbury_rank(g)
            h[j, :w], f[j, :w, :w], q[:, j, :w] = g.h_missing, g.factor, g.q_missing
            position[g.members] = j
        self._small_woodbury = SmallWoodbury(position, h, f, q)

    # ------------------------------------------------------------------ residual statistics
    def _residuals(self, Z, avail, groups, single, out: BlockResult) -> None:
        model = self.model
        idx = self._idx
        ok = np.flatnonzero(~single)
        if ok.size == 0:
            return
        vm = self._states[0][:, ok]
        va = self._states[1][:, ok]
        h = model.functions.evaluate(np.nan_to_num(vm, nan=1.0), np.nan_to_num(va),
                                     self.status).T
        out.residual[ok] = np.where(avail[ok], Z[ok] - h, np.nan)
        if not self.statistics:
            return
        for g in groups:
            mem = g.members[~single[g.members]]
            if mem.size == 0:
                continue
            full = np.full(model.m, np.nan)
            full[idx] = g.omega_diag
            out.omega[mem] = np.where(avail[mem], full[None, :], np.nan)

    # ------------------------------------------------------------------ fallback
    def _single(self, i: int, z: np.ndarray, confidence: float, out: BlockResult) -> dict:
        try:
            est = self.estimator.estimate(z, None, self.status)
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


