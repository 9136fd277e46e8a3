"""Factorizations and covariances shared by the week engine and the residual analysis.

The state covariance P of the equality-constrained WLS problem is the state block of
[[G, Cᵀ], [C, 0]]⁻¹ with G = HᵀR⁻¹H (sparse). Up to a few thousand states it comes from a
dense Cholesky inverse of G with the constraint correction, worked in place; beyond, or when G
alone is singular (states observable only with the zero-injection constraints), from sparse
solves. The diagonal of H P Hᵀ is summed over each sparse row's own nonzeros.
"""

from __future__ import annotations

import numpy as np
import scipy.linalg as la
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from calibra.model.network import branch_status

#: Entries per chunk when Hᵢ P Hᵢᵀ is summed over rows of H (bounds a temporary array).
OMEGA_CHUNK = 4_000_000

#: Dense inverse of the iteration matrix below this size (a matrix product is cheaper than
#: sparse triangular solves there: IEEE 118, 255 unknowns × 360 snapshots, 1.1 ms vs 3.7 ms).
DENSE_INVERSE_MAX = 800


def scaled_solver(lu, d: np.ndarray, dense: bool = True):
    """B ↦ K₀⁻¹B from the factorization of D⁻¹K₀D⁻¹ (a dense inverse when small and
    ``dense``: many right-hand sides to come)."""
    if dense and d.size <= DENSE_INVERSE_MAX:
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


def kkt_solver(G: sp.spmatrix, C: sp.spmatrix, T: sp.spmatrix | None = None,
               D: sp.spmatrix | None = None, orderings: tuple[str, ...] = ORDERINGS,
               dense: bool = True):
    """B ↦ K⁻¹B for K = [[G, Cᵀ], [C, D]] (D: zeros unless given), factorized in the
    variables x = T x' (see :func:`stiff_transform`) and scaled to a unit state diagonal."""
    nc = C.shape[0]
    C = sp.csr_matrix(C)
    Gn, Cn = (G, C) if T is None else ((T.T @ G @ T).tocsc(), C @ T)
    d = np.r_[np.sqrt(np.maximum(Gn.diagonal(), 1e-300)), np.ones(nc)]
    Dinv = sp.diags(1.0 / d)
    K = sp.bmat([[Gn, Cn.T], [Cn, D]], format="csc") if nc else sp.csc_matrix(Gn)
    solve = scaled_solver(sparsest_lu((Dinv @ K @ Dinv).tocsc(), orderings), d, dense)
    if T is None:
        return solve
    Tf = sp.block_diag([T, sp.identity(nc)], format="csr")
    Tft = Tf.T.tocsr()

    def solve_original(B: np.ndarray) -> np.ndarray:
        return np.asarray(Tf @ solve(np.asarray(Tft @ B)))

    return solve_original


def sparsest_lu(A: sp.csc_matrix, orderings: tuple[str, ...] = ORDERINGS):
    """SuperLU factors of A with the column ordering that fills least: the block's solves cost
    in proportion to the fill (2,000-bus network: 228-244 thousand nonzeros with COLAMD or
    minimum degree on AᵀA, 367 thousand on Aᵀ + A; solves 35 % faster), while factorizing
    takes tens of milliseconds. Small matrices get a dense inverse anyway: one ordering."""
    error: Exception | None = None
    best = None
    for spec in orderings if A.shape[0] > DENSE_INVERSE_MAX else orderings[:1]:
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


def _scaled_cholesky(G: sp.spmatrix) -> tuple[np.ndarray | None, np.ndarray]:
    """Lower Cholesky factor of G scaled to a unit diagonal (Fortran-ordered) and the scale;
    None when G is not clearly positive definite."""
    s = 1.0 / np.sqrt(np.maximum(G.diagonal(), 1e-300))
    # Symmetric: the transpose of the C-ordered array is the Fortran-ordered one LAPACK takes.
    Gs = (sp.diags(s) @ G @ sp.diags(s)).toarray().T
    try:
        c, _ = la.cho_factor(Gs, lower=True, overwrite_a=True, check_finite=False)
    except la.LinAlgError:
        return None, s
    if np.diag(c).min() ** 2 < 1e-10:
        return None, s
    return c, s


def state_columns(G0: sp.spmatrix, C0: sp.spmatrix) -> tuple[np.ndarray, np.ndarray] | None:
    """K₀⁻¹[:, :nx] for K₀ = [[G₀, C₀ᵀ], [C₀, 0]] as its state block P (nx × nx, symmetric,
    C-ordered) and multiplier block M (nc × nx), from a dense Cholesky inverse of G₀ (scaled to
    a unit diagonal): with S = C₀G₀⁻¹C₀ᵀ, P = G₀⁻¹ − G₀⁻¹C₀ᵀS⁻¹C₀G₀⁻¹ and M = S⁻¹C₀G₀⁻¹. None
    when G₀ alone is not positive definite (the state is then observable only with the
    zero-injection constraints): the caller solves K₀ instead. Works in G₀'s dense buffer
    (fresh pages are costly: a 4,000-state copy took longer than the product it held)."""
    nx, nc = G0.shape[0], C0.shape[0]
    # States seen only through the constraints leave G₀ singular: straight to G₀ + ρC₀ᵀC₀.
    c, s = _scaled_cholesky(G0) if not (nc and (G0.diagonal() <= 0).any()) else (None, None)
    if c is None and nc:
        # Observable only with the constraints: G₀ + ρC₀ᵀC₀ has the same state columns of
        # the constrained inverse (on Cx = 0 the added term vanishes, and for right-hand
        # sides [a; 0] the multipliers are unchanged too), and is positive definite.
        C0 = sp.csr_matrix(C0)
        ctc = (C0.T @ C0).tocsc()
        gd, cd = G0.diagonal(), ctc.diagonal()
        rho = float(np.median(gd[gd > 0])) / max(float(np.median(cd[cd > 0])), 1e-300) \
            if (gd > 0).any() and (cd > 0).any() else 1.0
        G0 = (G0 + rho * ctc).tocsc()
        c, s = _scaled_cholesky(G0)
    if c is None:
        return None  # nearly singular: leave it to the pivoting sparse factorization
    inv, info = la.lapack.dpotri(c, lower=1, overwrite_c=1)
    if info != 0:
        return None
    mirror_lower(inv)
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


def mirror_lower(a: np.ndarray, width: int = 256) -> None:
    """Copy the lower triangle of a square array onto its upper triangle, in place (by column
    panels, so the copy stays in cache: 40× faster than tril + tril.T on 4,000 × 4,000)."""
    n = a.shape[0]
    for j in range(0, n, width):
        e = min(j + width, n)
        a[j:e, e:] = a[e:, j:e].T
        upper = np.triu_indices(e - j, 1)
        block = a[j:e, j:e]
        block[upper] = block.T[upper]


def quadratic_diagonal(H: sp.csr_matrix, P: np.ndarray) -> np.ndarray:
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


def state_covariance(G: sp.spmatrix, C: sp.spmatrix, T: sp.spmatrix | None = None
                     ) -> np.ndarray:
    """P, the state block of [[G, Cᵀ], [C, 0]]⁻¹ (nx × nx, dense): a dense Cholesky inverse
    when G is positive definite and not too large, else sparse solves of the scaled system.
    ``T`` (see :func:`stiff_transform`): worked in the variables x = T x' and transformed
    back, P = T P' Tᵀ."""
    if T is not None:
        Pn = state_covariance((T.T @ G @ T).tocsc(), sp.csr_matrix(C) @ T)
        return back_transform(T, Pn)
    nx, nc = G.shape[0], C.shape[0]
    if nx <= DENSE_COVARIANCE_MAX:
        cols = state_columns(G.tocsc(), sp.csr_matrix(C))
        if cols is not None:
            return cols[0]
    d = np.r_[np.sqrt(np.maximum(G.diagonal(), 1e-300)), np.ones(nc)]
    Dinv = sp.diags(1.0 / d)
    K = sp.bmat([[G, sp.csr_matrix(C).T], [sp.csr_matrix(C), None]], format="csc") if nc \
        else sp.csc_matrix(G)
    solve = scaled_solver(sparsest_lu((Dinv @ K @ Dinv).tocsc()), d)
    E = np.zeros((nx + nc, nx))
    E[np.arange(nx), np.arange(nx)] = 1.0
    return np.ascontiguousarray(solve(E)[:nx])


def back_transform(T: sp.spmatrix, Pn: np.ndarray) -> np.ndarray:
    """T P' Tᵀ for a symmetric dense P' (C-ordered result)."""
    return np.ascontiguousarray(np.asarray(T @ np.asarray(T @ Pn).T).T)


#: Branches with |x| below this (pu) tie their buses' states so tightly that the gain matrix's
#: columns of the two buses are nearly parallel (bus couplers, short transformer leads).
STIFF_X = 1e-3
#: ... or with |x| below this share of the typical |x| of the branches at its ends.
RELATIVE_STIFF = 0.1


def stiff_transform(network, layout, in_service: np.ndarray,
                    threshold: float = STIFF_X) -> sp.csr_matrix | None:
    """A change of state variables that takes the near-parallel columns of bus couplers out of
    the gain matrix: within each group of buses tied by branches with |x| < ``threshold``, one
    bus keeps its angle and magnitude and every other bus is described by its difference to
    its neighbour towards that bus (a tree). Returns T (old state = T · new state), or None when
    the network has no such branch in the state.

    G' = TᵀGT then separates the stiff differences (huge, on their own diagonal) from the
    common levels, so diagonal scaling conditions it well (PEGASE 1354 with metered couplers:
    scaled condition number about 1e10 of the plain gain matrix)."""
    from scipy.sparse.csgraph import breadth_first_order, connected_components

    adm = network.branch_admittances(np.ones(network.n_branch, bool))
    x = np.abs(network.branches["x"].to_numpy(float))
    n = network.n_bus
    est = layout.magnitude_column >= 0
    on = branch_status(in_service) & (adm.f != adm.t)
    # Stiff: |x| below the threshold, or a tenth of the typical |x| at its two ends.
    ends = np.r_[adm.f[on], adm.t[on]]
    xs = np.r_[x[on], x[on]]
    order = np.lexsort((xs, ends))
    ends, xs = ends[order], xs[order]
    start = np.searchsorted(ends, np.arange(n))
    count = np.diff(np.r_[start, ends.size])
    typical = np.full(n, np.inf)
    has = count > 0
    typical[has] = xs[start[has] + count[has] // 2]  # median |x| of each bus's branches
    local = np.maximum(typical[adm.f], typical[adm.t])
    stiff = np.flatnonzero(on & ((x < threshold) | (x < RELATIVE_STIFF * local))
                           & est[adm.f] & est[adm.t])
    if stiff.size == 0:
        return None
    g = sp.coo_matrix((np.ones(stiff.size), (adm.f[stiff], adm.t[stiff])), shape=(n, n)).tocsr()
    g = g + g.T
    n_comp, comp = connected_components(g, directed=False)
    sizes = np.bincount(comp, minlength=n_comp)
    parent = np.full(n, -1, np.int64)
    for c in np.flatnonzero(sizes > 1):
        members = np.flatnonzero(comp == c)
        # The root keeps its own variables: the angle reference if it is in the group.
        no_angle = members[layout.angle_column[members] < 0]
        root = int(no_angle[0]) if no_angle.size else int(members[0])
        _, pred = breadth_first_order(g, root, directed=False, return_predecessors=True)
        parent[members] = pred[members]
        parent[root] = -1
    parent[parent < 0] = -1
    nx = layout.n_state
    rows, cols = [np.arange(nx)], [np.arange(nx)]
    for column in (layout.angle_column, layout.magnitude_column):
        for b in np.flatnonzero((parent >= 0) & (column >= 0)):
            a = parent[b]
            # old_b = new_b + new of every ancestor up to one without the variable (a fixed
            # angle reference ends the chain).
            while a >= 0 and column[a] >= 0:
                rows.append(np.array([column[b]]))
                cols.append(np.array([column[a]]))
                a = parent[a]
    r, c = np.concatenate(rows), np.concatenate(cols)
    return sp.csr_matrix((np.ones(r.size), (r, c)), shape=(nx, nx))
