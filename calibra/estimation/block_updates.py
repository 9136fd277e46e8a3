"""Per-pattern work of the block solver (:class:`calibra.estimation.block.BlockSolver`): the
Woodbury factors of the snapshots that miss measurements, reduced groups for patterns that
leave part of the block's islands unobservable, and Gauss-Newton on a snapshot's own matrix."""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import scipy.linalg as la
import scipy.sparse as sp

from calibra.estimation.block_parts import (
    CLEAR_PIVOT,
    CONTRACTION,
    MAX_NEWTON_STEP,
    MAX_WOODBURY,
    NEWTON_PATIENCE,
    NUMERICAL_ERRORS,
    ORDERINGS_ALONE,
    REFRESH_ALONE,
    SMALL_MISSING,
    MissingGroup,
    SmallWoodbury,
    downdated,
    woodbury_rank,
)
from calibra.estimation.covariance import (
    kkt_solver,
)
from calibra.estimation.measurements import unit_phasors
from calibra.estimation.residuals import CRITICAL_S
from calibra.estimation.wls import FEASIBLE, OVERSHOOT, objective_stationary

if TYPE_CHECKING:
    from calibra.estimation.block import BlockSolver


def factorize_reduced(s: BlockSolver, g: MissingGroup) -> None:
    """A missing set that leaves part of the block's islands unobservable (a meter that
    alone ties a bus or an island): the snapshots keep what their own pattern observes.

    K₀ becomes K_s by a low-rank update U C Uᵀ: rows removed (M and the rows the lost part
    makes unusable: [Hᵢᵀ; 0], C = −1/σᵢ²), constraints removed (λⱼ decoupled: columns
    [Cⱼᵀ; 0] and eⱼ, C = [[0, −1], [−1, 1]]), and every state the pattern leaves free held
    (lost buses, the angle reference of each new island: eₛ, C = G₀ₛₛ). The free states
    then appear in no row left, so the held values change nothing else: the iteration
    converges to the exact estimate of the observable part, and Woodbury gives K_s⁻¹
    from K₀⁻¹ with the capacitance −(C⁻¹ + UᵀK₀⁻¹U)."""
    model, idx, ref = s.model, s.setup.idx, s.setup.ref
    layout, nx, nc = s.setup.layout, s.setup.nx, s.setup.cidx.size
    avail = np.zeros(model.m, bool)
    avail[idx] = True
    avail[idx[g.missing]] = False
    obs = s.estimator.observability(avail, s.in_service)
    if obs.n_islands == 0:
        return
    unusable = np.flatnonzero(~obs.usable[idx] & avail[idx])
    removed = np.union1d(g.missing, unusable)
    if removed.size > MAX_WOODBURY:
        return
    off = ~obs.constraints_usable[s.setup.cidx]
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
    h_rows = s._H0_rows(removed)
    cons_rows = np.flatnonzero(off)
    C0 = s.setup.C0
    blocks = [np.hstack([h_rows, np.zeros((removed.size, nc))])]
    cinv = [np.diag(-s.setup.var[removed])]
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
        cinv.append(np.diag(1.0 / np.maximum(s.setup.g0_diag[pins], 1e-12)))
    Ut = np.vstack(blocks)  # r × dim
    Q = np.empty((dim, Ut.shape[0]))  # K₀⁻¹U
    Q[:, :removed.size] = s._columns.get(removed)
    if Ut.shape[0] > removed.size:
        Q[:, removed.size:] = s.setup.solve_k0(np.ascontiguousarray(Ut[removed.size:].T))
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
    if s.statistics:
        g.omega_diag = downdated(s.setup.omega_diag, -np.asarray(s.setup.H0 @ Q[:nx]).T,
                                  factor)


def factorize(s: BlockSolver, M: np.ndarray, groups: list[MissingGroup]) -> None:
    """Ωₘₘ⁻¹ and the updated Ωᵢᵢ for groups with equally many missing measurements
    (M: one row of base positions per group); a group whose Ωₘₘ is singular (removing M
    leaves the snapshot unobservable) keeps ``factor`` None."""
    G, size = M.shape
    union, pos = np.unique(M, return_inverse=True)
    pos = pos.reshape(M.shape)
    # K₀⁻¹[Hᵤᵀ; 0] by solves with the missing rows U (a few sparse solves cost far less
    # than products with the dense covariance on a large network).
    h_union = s._H0_rows(union)
    q_union = s._columns.get(union)
    om_uu = np.diag(s.setup.var[union]) - h_union @ q_union[:s.setup.nx]
    om_mm = om_uu[pos[:, :, None], pos[:, None, :]]
    om_ma = None
    if s.statistics:  # rows of Ω over the base list: Rδ − H₀ K₀⁻¹[Hᵤᵀ; 0]
        rows_u = -np.asarray(s.setup.H0 @ q_union[:s.setup.nx]).T
        rows_u[np.arange(union.size), union] += s.setup.var[union]
        om_ma = rows_u[pos]  # (G, size, base)
    scale = np.sqrt(s.setup.var[M])
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
        ok[g] = s._keeps_islands(M[g])
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
        grp.h_missing = np.hstack([h_union[pos[g]], np.zeros((mset.size, s.setup.cidx.size))])
        grp.q_missing = q_union[:, pos[g]]
        if om_ma is not None:
            grp.omega_diag = downdated(s.setup.omega_diag, om_ma[g], inv[j])


def newton_alone(s: BlockSolver, i: int, g: MissingGroup, Zt, W, vm, va, lam, done, iters) -> None:
    """Gauss-Newton for snapshot i on its own matrix (its weights, the constraints it keeps,
    the states its pattern leaves free held), from its last iterate or, when the block
    iteration ran away, from the reference state."""
    model, in_service, layout = s.model, s.in_service, s.setup.layout
    funcs, cons = model.functions, model.constraints
    nx, cidx = s.setup.nx, s.setup.cidx
    nc = cidx.size
    ref = s.setup.ref
    z, w = Zt[:, i:i + 1], W[:, i:i + 1]
    if s._diverged[i]:
        x_vm, x_va, x_lam = ref.vm[:, None].copy(), ref.va[:, None].copy(), \
            np.zeros((nc, 1))
        x_vm[~ref.observability.estimated_buses] = 1.0
        x_va[~ref.observability.estimated_buses] = 0.0
    else:
        x_vm, x_va, x_lam = vm[:, [i]].copy(), va[:, [i]].copy(), lam[:, [i]].copy()
    on = s._cons_on[:, i]
    off = np.flatnonzero(~on)
    pins = g.pins if g.pins is not None else np.zeros(0, np.int64)
    hold = sp.csr_matrix((s.setup.g0_diag[pins] if pins.size else np.zeros(0),
                          (pins, pins)), shape=(nx, nx))
    D = sp.csr_matrix((np.ones(off.size), (off, off)), shape=(nc, nc)) if nc else None
    keep = sp.diags(on.astype(float)) if nc else None
    last = best = step = objective_before = np.inf
    stuck = uses = 0
    solver = None
    previous = None
    history: list[float] = []
    steps: list[float] = []
    for it in range(1, s.max_iterations + 1):
        phasors = unit_phasors(x_va)
        h, rhs = funcs.evaluate_with_gradient(x_vm, x_va, layout, in_service, (z, w), phasors)
        objective = float(np.sum(w * (z - h) ** 2))
        # Damped: a step that raised J is halved (up to four times), as the single
        # estimator does.
        halvings = 0
        feasible = not nc or float(np.abs(cons.evaluate(x_vm, x_va, in_service)[cidx][on]).max(
            initial=0.0)) < FEASIBLE
        while previous is not None and halvings < 4 and feasible and \
                objective > objective_before * (1 + OVERSHOOT):
            p_vm, p_va, p_lam, p_sol = previous
            p_sol = p_sol * 0.5
            previous = (p_vm, p_va, p_lam, p_sol)
            x_vm, x_va = layout.apply_step(p_vm, p_va, p_sol[:nx])
            x_lam = (p_lam + p_sol[nx:]) * on[:, None] if nc else p_lam
            phasors = unit_phasors(x_va)
            h, rhs = funcs.evaluate_with_gradient(x_vm, x_va, layout, in_service, (z, w),
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
            c, c_grad = cons.evaluate_with_gradient(x_vm, x_va, layout, in_service, lam_rows,
                                                    phasors)
            c = -c[cidx]
            c[off] = 0.0
            rhs = np.vstack([rhs - c_grad, c])
        # The matrix is refactorized while the steps shrink slowly; once they contract
        # fast it is kept (the right-hand side is exact, so the fixed point is the same).
        if solver is None or uses >= REFRESH_ALONE or not step < CONTRACTION * last:
            H = funcs.jacobian(x_vm[:, 0], x_va[:, 0], layout, in_service)
            G = (H.T @ sp.diags(w[:, 0]) @ H + hold).tocsc()
            C = keep @ cons.jacobian(x_vm[:, 0], x_va[:, 0], layout, in_service)[cidx] if nc \
                else sp.csr_matrix((0, nx))
            try:
                solver = kkt_solver(G, C, s.setup.stiff, D, ORDERINGS_ALONE, dense=False)
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
        if step < s.tolerance or (it >= 10 and step < 100 * s.tolerance
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
        s._newton_last[i] = step
    vm[:, [i]], va[:, [i]], lam[:, [i]] = x_vm, x_va, x_lam


def woodbury(s: BlockSolver, sol: np.ndarray, active: np.ndarray, group_of: np.ndarray,
              groups: list[MissingGroup]) -> None:
    """Turn K₀⁻¹b into K_s⁻¹b for snapshots missing measurements M (in place).

    K_s = K₀ − Uₘ Wₘ Uₘᵀ; the Woodbury capacitance Rₘ − Hₘ P Hₘᵀ is Ωₘₘ. Snapshots that
    miss only a few measurements (the usual case: a dropped sample) are updated together
    from padded per-snapshot arrays; larger sets group by group.
    """
    small = s._small_woodbury
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


def pad_small_groups(s: BlockSolver, k: int, groups: list[MissingGroup]) -> None:
    """Per-snapshot padded Hₘ, Ωₘₘ⁻¹ and K₀⁻¹Uₘ for the groups with few missing
    measurements (zero padding leaves the update unchanged)."""
    small = [g for g in groups if g.factor is not None and woodbury_rank(g) <= SMALL_MISSING]
    if not small:
        s._small_woodbury = None
        return
    width = max(woodbury_rank(g) for g in small)
    dim = s.setup.nx + s.setup.cidx.size
    h = np.zeros((len(small), width, dim))
    f = np.zeros((len(small), width, width))
    q = np.zeros((dim, len(small), width))
    position = np.full(k, -1, np.int64)
    for j, g in enumerate(small):
        w = woodbury_rank(g)
        h[j, :w], f[j, :w, :w], q[:, j, :w] = g.h_missing, g.factor, g.q_missing
        position[g.members] = j
    s._small_woodbury = SmallWoodbury(position, h, f, q)

# ------------------------------------------------------------------ residual statistics
