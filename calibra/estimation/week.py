"""The week engine: estimate blocks of snapshots at once, with residual statistics.

For a block of snapshots with one topology, every snapshot is solved by the same fixed-matrix
iteration on the equality-constrained WLS optimality conditions::

    [ G₀  C₀ᵀ ] [ Δx ]   [ H(x)ᵀ W (z − h(x)) − C(x)ᵀ λ ]
    [ C₀  0   ] [ Δλ ] = [ −c(x)                         ]

G₀ and C₀ are taken once at a reference snapshot's converged state; h, H, c and C are
evaluated exactly for every snapshot (vectorised over the block, states as matrix columns).
The fixed point satisfies the exact optimality conditions, so the converged states equal a fully
converged Gauss-Newton solution of each snapshot (checked in the tests to 1e-6); G₀ only sets the
speed of convergence. Snapshots that do not converge, or whose measurement pattern is not fully
observable, fall back to the per-snapshot estimator and are reported as such.

Residual covariance: Ω = R − H P Hᵀ is computed once per block at the reference state for the
block's full measurement set; a snapshot that misses the measurements M gets the exact update
Ω'ᵢᵢ = Ωᵢᵢ − Ωᵢₘ Ωₘₘ⁻¹ Ωₘᵢ (a block Sherman-Morrison-Woodbury step), so only the change of
operating point within the block is approximated (see DEVELOPERS.md for the measured accuracy).
"""

from __future__ import annotations

import mmap
from dataclasses import dataclass

import numpy as np
import pandas as pd
import scipy.linalg as la
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from calibra.estimation.measurements import StateLayout, unit_phasors
from calibra.estimation.residuals import CRITICAL_S, analyse_residuals, chi_square_threshold
from calibra.estimation.runtime import can_fork, default_workers, fork_pool, tune_allocator
from calibra.estimation.wls import Estimator, rows_touching

#: Largest number of missing measurements handled by the Woodbury update of Ω.
MAX_WOODBURY = 400
#: Missing sets up to this size are updated together across the block (padded arrays).
SMALL_MISSING = 6
#: Entries per chunk when Hᵢ P Hᵢᵀ is summed over rows of H (bounds a temporary array).
OMEGA_CHUNK = 4_000_000
#: Largest state update (pu, rad) accepted as converged by default: the period's states are
#: kept as float32, whose resolution near 1 pu is 1.2e-7, so iterating further changes nothing
#: that is stored (against a 1e-11 run on IEEE 118 and the 2,000-bus network: states within
#: one float32 step, Ω within 1e-7 relative, 14 % fewer iterations).
BLOCK_TOLERANCE = 1e-7
#: Bytes of one complex (m × columns) array above which a block iterates its snapshots in
#: column chunks (large networks: keeps temporaries in reused memory and caches).
COLUMN_CHUNK_BYTES = 16 * 2**20


@dataclass
class BlockResult:
    """Estimates and residual statistics of k snapshots (arrays float32, NaN = not available).

    ``omega`` is the diagonal of the residual covariance Ω (pu²); ``outcomes`` one row per
    snapshot: converged, iterations, method ("block" or "single"), reason, objective, dof,
    chi2_threshold, observable, n_used.
    """

    vm: np.ndarray
    va: np.ndarray
    residual: np.ndarray
    omega: np.ndarray
    outcomes: pd.DataFrame


@dataclass
class _MissingGroup:
    """Snapshots of a block that miss the same base measurements M, with Ωₘₘ factorized."""

    members: np.ndarray  # snapshot positions in the block
    missing: np.ndarray  # positions in the base measurement list
    factor: np.ndarray | None  # Ωₘₘ⁻¹, None when M is empty or leaves M unobservable
    omega_diag: np.ndarray  # Ωᵢᵢ of the snapshot's pattern, over the base list
    h_missing: np.ndarray | None = None  # Hₘ (|M| × nx), dense
    q_missing: np.ndarray | None = None  # K₀⁻¹ [Hₘᵀ; 0] ((nx + nc) × |M|)


@dataclass
class _SmallWoodbury:
    """Padded Woodbury factors of the groups with at most SMALL_MISSING missing measurements,
    indexed by ``position`` (per snapshot of the block; −1: not such a group)."""

    position: np.ndarray
    h: np.ndarray  # (groups, width, nx)
    f: np.ndarray  # (groups, width, width)
    q: np.ndarray  # (nx + nc, groups, width)


#: Dense inverse of the iteration matrix below this size (a matrix product is cheaper than
#: sparse triangular solves there: IEEE 118, 255 unknowns × 360 snapshots, 1.1 ms vs 3.7 ms).
DENSE_INVERSE_MAX = 800


def _scaled_solver(lu, d: np.ndarray):
    """B ↦ K₀⁻¹B from the factorization of D⁻¹K₀D⁻¹ (a dense inverse when small)."""
    if d.size <= DENSE_INVERSE_MAX:
        inv = lu.solve(np.diag(1.0 / d)) / d[:, None]

        def solve(B: np.ndarray) -> np.ndarray:
            return inv @ B
    else:
        def solve(B: np.ndarray) -> np.ndarray:
            if B.ndim == 2:
                return lu.solve(B / d[:, None]) / d[:, None]
            return lu.solve(B / d) / d
    return solve


#: Column orderings tried for a large iteration matrix (the first one alone for a small one).
ORDERINGS = ("COLAMD", "MMD_ATA", "MMD_AT_PLUS_A")


def _sparsest_lu(A: sp.csc_matrix):
    """SuperLU factors of A with the column ordering that fills least: the block's solves cost
    in proportion to the fill (2,000-bus network: 228-244 thousand nonzeros with COLAMD or
    minimum degree on AᵀA, 367 thousand on Aᵀ + A; solves 35 % faster), while factorizing
    takes tens of milliseconds. Small matrices get a dense inverse anyway: one ordering."""
    error: Exception | None = None
    best = None
    for spec in ORDERINGS if A.shape[0] > DENSE_INVERSE_MAX else ORDERINGS[:1]:
        try:
            lu = spla.splu(A, permc_spec=spec, diag_pivot_thresh=0.01)
        except RuntimeError as exc:  # exactly singular with this ordering's pivots
            error = exc
            continue
        if best is None or lu.nnz < best.nnz:
            best = lu
    if best is None:
        raise error
    return best


#: Largest state for which K₀⁻¹'s state columns come from a dense Cholesky inverse of G₀
#: (LAPACK potrf + potri: 1.9 s for 4,000 states, against 4-5 s of sparse solves).
DENSE_COVARIANCE_MAX = 6000


def _state_columns(G0: sp.spmatrix, C0: sp.spmatrix) -> tuple[np.ndarray, np.ndarray] | None:
    """K₀⁻¹[:, :nx] for K₀ = [[G₀, C₀ᵀ], [C₀, 0]] as its state block P (nx × nx, symmetric,
    C-ordered) and multiplier block M (nc × nx), from a dense Cholesky inverse of G₀ (scaled to
    a unit diagonal): with S = C₀G₀⁻¹C₀ᵀ, P = G₀⁻¹ − G₀⁻¹C₀ᵀS⁻¹C₀G₀⁻¹ and M = S⁻¹C₀G₀⁻¹. None
    when G₀ alone is not positive definite (the state is then observable only with the
    zero-injection constraints): the caller solves K₀ instead. Works in G₀'s dense buffer
    (fresh pages are costly: a 4,000-state copy took longer than the product it held)."""
    nx, nc = G0.shape[0], C0.shape[0]
    s = 1.0 / np.sqrt(np.maximum(G0.diagonal(), 1e-300))
    # Symmetric: the transpose of the C-ordered array is the Fortran-ordered one LAPACK takes.
    Gs = (sp.diags(s) @ G0 @ sp.diags(s)).toarray().T
    try:
        c, _ = la.cho_factor(Gs, lower=True, overwrite_a=True, check_finite=False)
    except la.LinAlgError:
        return None
    if np.diag(c).min() ** 2 < 1e-10:
        return None  # nearly singular: leave it to the pivoting sparse factorization
    inv, info = la.lapack.dpotri(c, lower=1, overwrite_c=1)
    if info != 0:
        return None
    _mirror_lower(inv)
    inv *= s[:, None]
    inv *= s[None, :]  # G₀⁻¹, symmetric and Fortran-ordered
    if nc == 0:
        return inv.T, np.zeros((0, nx))
    GCt = np.asarray(C0 @ inv.T).T  # G₀⁻¹C₀ᵀ (nx × nc); inv.T: the same, C-ordered
    S = np.asarray(C0 @ GCt)
    try:
        SinvCG = la.solve(S, GCt.T, assume_a="sym")  # M = S⁻¹C₀G₀⁻¹ (nc × nx)
    except la.LinAlgError:
        return None
    # P = G₀⁻¹ − G₀⁻¹C₀ᵀ M in place (BLAS gemm into the Fortran-ordered buffer).
    P = la.blas.dgemm(-1.0, GCt, SinvCG, beta=1.0, c=inv, overwrite_c=1)
    return P.T, SinvCG


def _mirror_lower(a: np.ndarray, width: int = 256) -> None:
    """Copy the lower triangle of a square array onto its upper triangle, in place (by column
    panels, so the copy stays in cache: 40× faster than tril + tril.T on 4,000 × 4,000)."""
    n = a.shape[0]
    for j in range(0, n, width):
        e = min(j + width, n)
        a[j:e, e:] = a[e:, j:e].T
        upper = np.triu_indices(e - j, 1)
        block = a[j:e, j:e]
        block[upper] = block.T[upper]


def _quadratic_diagonal(H: sp.csr_matrix, P: np.ndarray) -> np.ndarray:
    """diag(H P Hᵀ) for a sparse H with few nonzeros per row: Σⱼₗ Hᵢⱼ Pⱼₗ Hᵢₗ over each row's
    own columns (O(m·r²) for r nonzeros per row, instead of the O(nnz·n) of H @ P)."""
    H = H.tocsr()
    H.sum_duplicates()
    counts = np.diff(H.indptr)
    out = np.zeros(H.shape[0])
    for r in np.unique(counts[counts > 0]):
        rows = np.flatnonzero(counts == r)
        step = max(1, OMEGA_CHUNK // int(r * r))
        for a in range(0, rows.size, step):
            sel = rows[a:a + step]
            pos = H.indptr[sel][:, None] + np.arange(r)[None, :]
            cols, vals = H.indices[pos], H.data[pos]
            block = P[cols[:, :, None], cols[:, None, :]]  # (rows, r, r)
            out[sel] = np.einsum("ij,ijl,il->i", vals, block, vals)
    return out


class BlockSolver:
    """Solves many snapshots of one topology around one reference state together."""

    def __init__(self, estimator: Estimator, status: np.ndarray,
                 tolerance: float = BLOCK_TOLERANCE,
                 max_iterations: int = 40, partial: bool = False):
        self.estimator = estimator
        self.model = estimator.model
        self.status = status
        self.tolerance = tolerance
        self.max_iterations = max_iterations
        #: Accept a reference that is not fully observable (a block inside an RTU outage):
        #: the block then estimates the observable islands of that reference.
        self.partial = partial

    # ------------------------------------------------------------------ public
    def solve(self, Z: np.ndarray, confidence: float = 0.99) -> BlockResult:
        """Estimate every row of Z (k × m, per unit, NaN = missing)."""
        model = self.model
        k, m = Z.shape
        n = model.network.n_bus
        avail = np.isfinite(Z)
        out = BlockResult(
            np.full((k, n), np.nan, np.float32), np.full((k, n), np.nan, np.float32),
            np.full((k, m), np.nan, np.float32), np.full((k, m), np.nan, np.float32),
            pd.DataFrame(),
        )
        rows: list[dict] = [{} for _ in range(k)]
        single = np.ones(k, bool)
        ref = self._reference(Z, avail)
        if ref is not None:
            usable = ~rows_touching(model.functions, ~ref.observability.estimated_buses)
            avail = avail & usable[None, :]
            self._prepare(ref, avail.any(axis=0))
            groups = self._groups(avail)
            blockable = [g for g in groups if g.factor is not None or g.missing.size == 0]
            if blockable:
                members = np.concatenate([g.members for g in blockable])
                done, iters = self._iterate(Z, avail, blockable, out)
                observable = ref.observability.observable
                for i in members[done[members]]:
                    single[i] = False
                    rows[i] = {"converged": True, "iterations": int(iters[i]), "method": "block",
                               "reason": ref.reason, "observable": observable,
                               "dof": int(avail[i].sum()) - (self._nx - self._cidx.size)}
                self._residuals(Z, avail, blockable, single, out)
        rest = np.flatnonzero(single)
        if not self.partial and rest.size >= 4:
            self._solve_partial_groups(Z, rest, confidence, out, rows, single)
        for i in np.flatnonzero(single):
            rows[i] = self._single(i, Z[i], confidence, out)
        out.outcomes = pd.DataFrame(rows)
        res = out.residual.astype(float)
        used = np.isfinite(res)
        out.outcomes["n_used"] = used.sum(axis=1)
        out.outcomes["objective"] = np.where(used, res, 0.0) ** 2 @ (1.0 / model.sigma_pu ** 2)
        return out

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
                              partial=True).solve(Z[members], confidence)
            ok = sub.outcomes["method"].to_numpy() == "block"
            for j in np.flatnonzero(ok):
                i = members[j]
                single[i] = False
                out.vm[i], out.va[i] = sub.vm[j], sub.va[j]
                out.residual[i], out.omega[i] = sub.residual[j], sub.omega[j]
                rows[i] = {c: sub.outcomes.iloc[j][c] for c in
                           ("converged", "iterations", "method", "reason", "observable", "dof")}

    # ------------------------------------------------------------------ set-up
    def _reference(self, Z: np.ndarray, avail: np.ndarray):
        """A converged snapshot of the block (most measurements first): fully observable, or
        in a partial block the most complete one."""
        base = avail.any(axis=0)
        if not base.any():
            return None
        if not self.partial and not self.estimator.observability(base, self.status).observable:
            return None
        # The most complete snapshots, the one nearest the middle of the block first: the
        # block iterates around the reference's operating point.
        count = avail.sum(axis=1)
        middle = np.abs(np.arange(len(count)) - (len(count) - 1) / 2)
        order = np.lexsort((middle, -count))
        for cand in order[:5]:
            # The reference only sets the iteration matrix: the block's tolerance is enough.
            est = self.estimator.estimate(Z[cand], None, self.status,
                                          tolerance=max(self.tolerance, 1e-8))
            if est.converged and (self.partial or est.observability.observable):
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
        d = np.r_[np.sqrt(np.maximum(G0.diagonal(), 1e-300)), np.ones(nc)]
        Dinv = sp.diags(1.0 / d)
        K0 = sp.bmat([[G0, C0.T], [C0, None]], format="csc") if nc else G0
        self._solve_k0 = _scaled_solver(_sparsest_lu((Dinv @ K0 @ Dinv).tocsc()), d)
        # K₀⁻¹'s state columns: its top block is the state covariance P of the constrained
        # problem. Everything the block needs follows from it and H₀: Ωᵢᵢ = Rᵢᵢ − H₀ᵢ P H₀ᵢᵀ,
        # rows of Ω on demand, and K₀⁻¹[H₀ₘᵀ; 0] for the Woodbury updates — an (nx + nc) × nx
        # array rather than (nx + nc) × m (on a 2,000-bus network, 0.13 GB instead of 0.6 GB).
        cols = _state_columns(G0, C0) if DENSE_INVERSE_MAX < nx <= DENSE_COVARIANCE_MAX \
            else None
        if cols is None:
            E = np.zeros((nx + nc, nx))
            E[np.arange(nx), np.arange(nx)] = 1.0
            K0_state = self._solve_k0(E)
            cols = (np.ascontiguousarray(K0_state[:nx]), K0_state[nx:])
        P, M = cols
        self._P = P
        # Columns of Mᵀ are read by sparse products (Woodbury columns): keep it C-ordered.
        self._Mt = np.ascontiguousarray(M.T)
        self._H0 = H0
        # A dense copy makes row access cheap; only when it stays small.
        self._H0_dense = H0.toarray() if idx.size * nx <= 5_000_000 else None
        self._var = var
        self._idx = idx
        self._omega_diag = var - _quadratic_diagonal(H0, P)
        self._layout, self._cidx, self._nx, self._ref = layout, cidx, nx, ref

    def _groups(self, avail: np.ndarray) -> list[_MissingGroup]:
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
        groups = [_MissingGroup(order[bounds[g]:bounds[g + 1]], sets[g], None, self._omega_diag)
                  for g in range(first.size)]
        by_size: dict[int, list[int]] = {}
        for g, mset in enumerate(sets):
            if 0 < mset.size <= MAX_WOODBURY:
                by_size.setdefault(mset.size, []).append(g)
        for size, members in by_size.items():
            # Batches small enough that the stacked Ω rows stay a few tens of MB.
            batch = max(1, 4_000_000 // (size * max(idx.size, 1)))
            for start in range(0, len(members), batch):
                chunk = members[start:start + batch]
                self._factorize(np.stack([sets[g] for g in chunk]), [groups[g] for g in chunk])
        return groups

    def _factorize(self, M: np.ndarray, groups: list[_MissingGroup]) -> None:
        """Ωₘₘ⁻¹ and the updated Ωᵢᵢ for groups with equally many missing measurements
        (M: one row of base positions per group); a group whose Ωₘₘ is singular (removing M
        leaves the snapshot unobservable) keeps ``factor`` None."""
        G, size = M.shape
        union, pos = np.unique(M, return_inverse=True)
        om_ma = self._omega_rows(union)[pos.reshape(M.shape)]  # (G, size, base)
        om_mm = om_ma[np.arange(G)[:, None, None], np.arange(size)[None, :, None],
                      M[:, None, :]]
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
        sel = np.flatnonzero(ok)
        if sel.size == 0:
            return
        Linv = np.linalg.inv(L[sel])
        inv = np.einsum("gqp,gqr->gpr", Linv, Linv)  # (LLᵀ)⁻¹ = L⁻ᵀL⁻¹
        inv = inv / scale[sel][:, :, None] / scale[sel][:, None, :]
        om_sel = om_ma[sel]
        diag = self._omega_diag[None, :] - np.einsum("gpm,gpm->gm", om_sel, inv @ om_sel)
        for j, g in enumerate(sel):
            mset = M[g]
            grp = groups[g]
            grp.factor = inv[j]
            grp.omega_diag = np.maximum(diag[j], 0.0)
            grp.h_missing = self._H0_rows(mset)
            # K₀⁻¹ [H₀ₘᵀ; 0] from the sparse rows (a few nonzeros each).
            grp.q_missing = self._k0_columns(mset)

    def _H0_rows(self, rows: np.ndarray) -> np.ndarray:
        if self._H0_dense is not None:
            return self._H0_dense[rows]
        return self._H0[rows].toarray()

    def _k0_columns(self, rows: np.ndarray) -> np.ndarray:
        """K₀⁻¹ [H₀ᵣᵀ; 0] ((nx + nc) × |rows|) from the sparse rows (a few nonzeros each)."""
        h = self._H0[rows]
        return np.vstack([(h @ self._P).T, (h @ self._Mt).T])

    def _omega_rows(self, rows: np.ndarray) -> np.ndarray:
        """Rows of Ω = R − H P Hᵀ over the base list."""
        P = self._P
        # Rows H₀ᵢ P: a sparse product unless H₀ is small enough to be kept dense.
        hp = self._H0_dense[rows] @ P if self._H0_dense is not None else self._H0[rows] @ P
        om = -(self._H0 @ hp.T).T
        om[np.arange(rows.size), rows] += self._var[rows]
        return om

    # ------------------------------------------------------------------ block iteration
    def _iterate(self, Z: np.ndarray, avail: np.ndarray, groups: list[_MissingGroup],
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

        self._pad_small_groups(k, groups)
        members = np.flatnonzero(group_of >= 0)
        # Snapshots are independent: on a large network they go through in column chunks.
        width = max(8, COLUMN_CHUNK_BYTES // (16 * max(model.m, len(model.network.buses))))
        for c0 in range(0, members.size, width):
            self._iterate_columns(members[c0:c0 + width], group_of, groups, Zt, W, vm, va, lam,
                                  done, iters)
        vm[lost], va[lost] = np.nan, np.nan
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
        accel = _Anderson(nx + nc, live.size)
        for _ in range(self.max_iterations):
            if live.size == 0:
                break
            phasors = unit_phasors(x_va)
            _, rhs = funcs.evaluate_with_gradient(x_vm, x_va, status, layout, (z, w), phasors)
            if nc:
                lam_rows = np.zeros((cons.m, live.size))
                lam_rows[cidx] = x_lam
                c, c_grad = cons.evaluate_with_gradient(x_vm, x_va, status, layout, lam_rows,
                                                        phasors)
                rhs = np.vstack([rhs - c_grad, -c[cidx]])
            sol = self._solve_k0(rhs)
            self._woodbury(sol, live, group_of, groups)
            step = np.abs(sol[:nx]).max(axis=0)
            sol = accel.step(sol, nx)
            if nc:
                x_lam += sol[nx:]
            x_vm, x_va = layout.apply_step(x_vm, x_va, sol[:nx])
            iters[live] += 1
            finished = step < self.tolerance
            stay = ~finished & (np.isfinite(step) & (step <= 10.0))
            done[live[finished]] = True
            if not stay.all():
                leave = ~stay
                gone = live[leave]
                vm[:, gone], va[:, gone], lam[:, gone] = x_vm[:, leave], x_va[:, leave], \
                    x_lam[:, leave]
                live = live[stay]
                z, w = z[:, stay], w[:, stay]
                x_vm, x_va, x_lam = x_vm[:, stay], x_va[:, stay], x_lam[:, stay]
                accel.keep(stay)
        vm[:, live], va[:, live], lam[:, live] = x_vm, x_va, x_lam

    def _woodbury(self, sol: np.ndarray, active: np.ndarray, group_of: np.ndarray,
                  groups: list[_MissingGroup]) -> None:
        """Turn K₀⁻¹b into K_s⁻¹b for snapshots missing measurements M (in place).

        K_s = K₀ − Uₘ Wₘ Uₘᵀ; the Woodbury capacitance Rₘ − Hₘ P Hₘᵀ is Ωₘₘ. Snapshots that
        miss only a few measurements (the usual case: a dropped sample) are updated together
        from padded per-snapshot arrays; larger sets group by group.
        """
        nx = self._nx
        small = self._small_woodbury
        if small is not None:
            pos = small.position[active]
            cols = np.flatnonzero(pos >= 0)
            if cols.size:
                p = pos[cols]
                t = np.einsum("kpn,nk->kp", small.h[p], sol[:nx, cols])
                t = np.einsum("kpq,kq->kp", small.f[p], t)
                sol[:, cols] += np.einsum("dkp,kp->dk", small.q[:, p], t)
        gids = group_of[active]
        for gi in np.unique(gids):
            g = groups[gi]
            if g.factor is None or g.missing.size <= SMALL_MISSING:
                continue
            cols = np.flatnonzero(gids == gi)
            sol[:, cols] += g.q_missing @ (g.factor @ (g.h_missing @ sol[:nx, cols]))

    def _pad_small_groups(self, k: int, groups: list[_MissingGroup]) -> None:
        """Per-snapshot padded Hₘ, Ωₘₘ⁻¹ and K₀⁻¹Uₘ for the groups with few missing
        measurements (zero padding leaves the update unchanged)."""
        small = [g for g in groups if g.factor is not None and g.missing.size <= SMALL_MISSING]
        if not small:
            self._small_woodbury = None
            return
        width = max(g.missing.size for g in small)
        dim = self._nx + self._cidx.size
        h = np.zeros((len(small), width, self._nx))
        f = np.zeros((len(small), width, width))
        q = np.zeros((dim, len(small), width))
        position = np.full(k, -1, np.int64)
        for j, g in enumerate(small):
            w = g.missing.size
            h[j, :w], f[j, :w, :w], q[:, j, :w] = g.h_missing, g.factor, g.q_missing
            position[g.members] = j
        self._small_woodbury = _SmallWoodbury(position, h, f, q)

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
        for g in groups:
            mem = g.members[~single[g.members]]
            if mem.size == 0:
                continue
            full = np.full(model.m, np.nan)
            full[idx] = g.omega_diag
            out.omega[mem] = np.where(avail[mem], full[None, :], np.nan)

    # ------------------------------------------------------------------ fallback
    def _single(self, i: int, z: np.ndarray, confidence: float, out: BlockResult) -> dict:
        est = self.estimator.estimate(z, None, self.status)
        row = {"converged": est.converged, "iterations": est.iterations, "method": "single",
               "reason": est.reason, "observable": est.observability.observable,
               "dof": est.dof}
        if est.converged:
            out.vm[i], out.va[i] = est.vm, est.va
            out.residual[i] = est.residual
            out.omega[i] = analyse_residuals(self.estimator, est, confidence).omega_diag
        return row


class _Anderson:
    """Anderson acceleration of the block's fixed-point iteration, one least-squares mixing
    per snapshot column (memory ``depth``).

    The plain iteration y ← y + f(y) (f: the Gauss-Newton-like step with the fixed matrix)
    converges linearly; mixing the last steps — s = f − (ΔY + ΔF)γ with γ minimising
    ‖f − ΔF γ‖ over the state rows — speeds it up without moving the fixed point, so the
    converged states are the same. A column whose mixed step is far larger than its plain
    step keeps the plain step. All columns start together and share one history length (kept
    in ring buffers); columns that stop iterating are dropped with :meth:`keep`.
    """

    def __init__(self, dim: int, k: int, depth: int = 3):
        self.depth = depth
        self.prev_f = np.zeros((dim, k))
        self.prev_s = np.zeros((dim, k))
        self.df = np.zeros((depth, dim, k))  # ring buffers of ΔF and ΔY + ΔF
        self.dyf = np.zeros((depth, dim, k))
        self.count = 0  # steps taken

    def keep(self, columns: np.ndarray) -> None:
        """Keep only the given columns (a mask or positions) of the history."""
        self.prev_f, self.prev_s = self.prev_f[:, columns], self.prev_s[:, columns]
        self.df, self.dyf = self.df[:, :, columns], self.dyf[:, :, columns]

    def step(self, f: np.ndarray, rows: int) -> np.ndarray:
        """The step to apply for every column (f: their plain steps)."""
        s = f
        if self.count:
            slot = (self.count - 1) % self.depth
            df = f - self.prev_f
            self.df[slot] = df
            np.add(self.prev_s, df, out=self.dyf[slot])
            used = min(self.count, self.depth)
            D = self.df[:used, :rows]  # (used, rows, k)
            G = np.einsum("pdj,qdj->jpq", D, D)
            b = np.einsum("pdj,dj->jp", D, f[:rows])
            reg = 1e-10 * np.maximum(np.trace(G, axis1=1, axis2=2), 1e-300)
            G = G + reg[:, None, None] * np.eye(used)[None]
            try:
                gamma = np.linalg.solve(G, b[..., None])[..., 0]  # (k, used)
            except np.linalg.LinAlgError:
                gamma = np.zeros((f.shape[1], used))
            mix = np.einsum("pdj,jp->dj", self.dyf[:used], gamma)
            s = f - mix
            wild = np.abs(s[:rows]).max(axis=0) > 10 * np.abs(f[:rows]).max(axis=0) + 1e-12
            s[:, wild] = f[:, wild]
        self.prev_f[...] = f
        self.prev_s[...] = s
        self.count += 1
        return s


@dataclass
class PeriodResult:
    """Block results of a whole period, stacked in time order (arrays as in BlockResult)."""

    index: pd.Index
    vm: np.ndarray
    va: np.ndarray
    residual: np.ndarray
    omega: np.ndarray
    outcomes: pd.DataFrame


def topology_runs(in_service: np.ndarray, max_block: int,
                  index: pd.Index | None = None) -> list[tuple[int, int]]:
    """Split snapshot positions into runs of one topology, each at most ``max_block`` long.

    With a DatetimeIndex, runs also break at every UTC day, so that a period cut into days
    (a cluster works day by day) is solved in exactly the same blocks as the whole period.
    """
    k = in_service.shape[0]
    if k == 0:
        return []
    change = np.r_[True, np.any(in_service[1:] != in_service[:-1], axis=1)]
    if isinstance(index, pd.DatetimeIndex) and len(index) == k:
        day = index.normalize().asi8
        change |= np.r_[True, day[1:] != day[:-1]]
    starts = np.flatnonzero(change)
    ends = np.r_[starts[1:], k]
    runs = []
    for a, b in zip(starts, ends, strict=True):
        for s in range(a, b, max_block):
            runs.append((int(s), int(min(s + max_block, b))))
    return runs


_WORK: dict = {}  # inherited by forked block workers: estimator, z, in_service, settings, out


def _solve_run(run: tuple[int, int]) -> tuple[int, int, pd.DataFrame]:
    """Solve one block and write its arrays into the period's output (shared with the parent
    process when in a worker), returning only the outcomes table."""
    a, b = run
    w = _WORK
    solver = BlockSolver(w["estimator"], w["in_service"][a], tolerance=w["tolerance"])
    block = solver.solve(w["z"][a:b], w["confidence"])
    vm, va, res, om = w["out"]
    vm[a:b], va[a:b], res[a:b], om[a:b] = block.vm, block.va, block.residual, block.omega
    return a, b, block.outcomes


def _output_array(shape: tuple[int, int], shared: bool) -> np.ndarray:
    """A float32 array for period results; in memory shared with forked workers (an anonymous
    shared mapping) when ``shared``, so blocks are written in place instead of sent back."""
    if not shared:
        return np.empty(shape, np.float32)
    size = int(np.prod(shape)) * 4
    buf = mmap.mmap(-1, max(size, 1), flags=mmap.MAP_SHARED)
    return np.frombuffer(buf, np.float32, count=int(np.prod(shape))).reshape(shape)


def estimate_period(
    estimator: Estimator,
    z: np.ndarray,
    in_service: np.ndarray,
    index: pd.Index | None = None,
    max_block: int = 360,
    confidence: float = 0.99,
    progress=None,
    tolerance: float = BLOCK_TOLERANCE,
    workers: int | None = None,
) -> PeriodResult:
    """Estimate every snapshot of a period (k × m per unit) block by block.

    Blocks hold one topology and at most ``max_block`` consecutive snapshots (6 h of one-minute
    data by default), so the reference state of a block stays close to all its snapshots.
    Blocks run in ``workers`` processes (default: :func:`default_workers`); each block is
    solved the same way wherever it runs, so the results do not depend on the number of
    workers. ``tolerance`` is the largest state update accepted as converged.
    """
    tune_allocator()
    k, m = z.shape
    n = estimator.model.network.n_bus
    runs = topology_runs(in_service, max_block, index)
    workers = default_workers() if workers is None else workers
    parallel = len(runs) > 1 and can_fork(workers)
    # The runs cover every snapshot once, so every row of the outputs is written.
    vm, va = (_output_array((k, n), parallel) for _ in range(2))
    res, om = (_output_array((k, m), parallel) for _ in range(2))
    frames: dict[int, pd.DataFrame] = {}
    _WORK.update(estimator=estimator, z=z, in_service=in_service, tolerance=tolerance,
                 confidence=confidence, out=(vm, va, res, om))
    pool = None
    done = 0
    try:
        pool = fork_pool(workers) if parallel else None  # forked now: inherits _WORK
        results = pool.imap_unordered(_solve_run, runs) if pool else map(_solve_run, runs)
        for a, b, block_outcomes in results:
            frames[a] = block_outcomes
            done += b - a
            if progress is not None:
                progress.update(done, k, "estimating snapshots")
    finally:
        _WORK.clear()
        if pool is not None:
            pool.terminate()
            pool.join()
    outcomes = pd.concat([frames[a] for a in sorted(frames)], ignore_index=True) \
        if frames else pd.DataFrame()
    if len(outcomes):
        dof = outcomes["dof"].clip(lower=1)
        outcomes["chi2_threshold"] = chi_square_threshold(confidence, dof.to_numpy(float))
        outcomes["chi2_passed"] = outcomes["objective"] <= outcomes["chi2_threshold"]
        outcomes.loc[~outcomes["converged"].astype(bool), "chi2_passed"] = False
    idx = index if index is not None else pd.RangeIndex(k, name="snapshot")
    outcomes.index = idx
    return PeriodResult(idx, vm, va, res, om, outcomes)
