"""The block (week) engine against the fully converged per-snapshot estimator."""

from __future__ import annotations

import numpy as np
import pandas as pd

from calibra.estimation.measurement_model import MeasurementModel
from calibra.estimation.residuals import analyse_residuals
from calibra.estimation.week import BlockSolver
from calibra.estimation.wls import Estimator
from tests.estimation.conftest import model_and_truth, solve_with_pypower


def _varied_snapshots(case, k: int, seed: int):
    """Measurements of k operating points around a pypower solution (angles scaled by a common
    loading factor of ±15 %, voltages shifted by ±1 % with 0.2 % per-bus scatter, then measured
    exactly through h(x)) with noise and scattered missing values."""
    model, _ = model_and_truth(case)
    rng = np.random.default_rng(seed)
    n = case.network.n_bus
    loading = 1 + 0.15 * np.sin(np.linspace(0, 2 * np.pi, k))[None, :]
    vm = case.vm[:, None] * (1 + 0.01 * (loading - 1) / 0.15 + 0.002 * rng.normal(size=(n, k)))
    va = case.va[:, None] * loading + 0.0005 * rng.normal(size=(n, k))
    va[case.network.reference_position] = 0.0
    z = model.functions.evaluate(vm, va).T
    z = z + rng.normal(size=z.shape) * model.sigma_pu
    z[rng.random(z.shape) < 0.005] = np.nan
    return model, z


def test_block_states_equal_converged_gauss_newton(case118_solved):
    """Converged block states match a fully converged per-snapshot Gauss-Newton to 1e-6 pu
    (the block iteration solves the exact optimality conditions; common practice, no source)."""
    model, Z = _varied_snapshots(case118_solved, 60, 5)
    estimator = Estimator(model)
    result = BlockSolver(estimator, model.network.default_in_service()).solve(Z)
    assert (result.outcomes["method"] == "block").mean() > 0.9
    assert result.outcomes["converged"].all()
    for i in range(0, 60, 7):
        exact = estimator.estimate(Z[i])
        assert np.nanmax(np.abs(exact.vm - result.vm[i])) < 1e-6
        assert np.nanmax(np.abs(exact.va - result.va[i])) < 1e-6
        r_exact = exact.residual[exact.used]
        assert np.allclose(result.residual[i][exact.used], r_exact, atol=1e-6)


def test_block_residual_covariance_close_to_exact(case118_solved):
    """Ωᵢᵢ from the block's reference state with the exact Woodbury update for missing
    measurements stays within a few per cent of the exact per-snapshot value."""
    model, Z = _varied_snapshots(case118_solved, 40, 6)
    estimator = Estimator(model)
    result = BlockSolver(estimator, model.network.default_in_service()).solve(Z)
    worst = 0.0
    for i in range(0, 40, 5):
        exact = estimator.estimate(Z[i])
        om = analyse_residuals(estimator, exact).omega_diag
        ok = np.isfinite(om) & (om > 1e-3 * model.sigma_pu ** 2)
        worst = max(worst, float(np.nanmax(np.abs(result.omega[i][ok] - om[ok]) / om[ok])))
    assert worst < 0.05


def test_snapshot_that_loses_a_bus_stays_in_the_block():
    """A snapshot whose missing meters leave a bus unobservable stays in the block: its own
    pattern is estimated exactly (an exact low-rank update of the block's matrix), the bus is
    left out, and the outcome says so (common practice, no source)."""
    from pypower.api import case57

    case = solve_with_pypower(case57)
    model, Z = _varied_snapshots(case, 12, 7)
    # Snapshot 3 loses every measurement that sees bus 33 (radial off 32): its meters, the
    # flows on branch 32–33 and the injections at bus 32.
    lose = [i for i, t in enumerate(model.tags)
            if t.startswith(("33:", "32-33-1:", "32:p_inj", "32:q_inj"))]
    Z[3, lose] = np.nan
    estimator = Estimator(model)
    result = BlockSolver(estimator, model.network.default_in_service()).solve(Z)
    row = result.outcomes.iloc[3]
    assert row["method"] == "block" and row["converged"]
    assert not row["observable"] and row["buses_not_estimated"] == 1
    assert "cannot be estimated" in row["reason"]
    assert np.isnan(result.vm[3, case.network.buses.index.get_loc("33")])
    assert (result.outcomes["method"] == "block").all()
    assert result.outcomes.drop(index=3)["observable"].all()
    exact = estimator.estimate(Z[3])
    assert np.nanmax(np.abs(exact.vm - result.vm[3])) < 1e-6
    assert np.nanmax(np.abs(exact.va - result.va[3])) < 1e-6
    used = exact.used
    assert np.allclose(result.residual[3][used], exact.residual[used], atol=1e-6)
    assert np.isnan(result.residual[3][~used & np.isfinite(Z[3])]).all()


def test_state_columns_from_dense_cholesky_equal_a_sparse_solve(case118_solved):
    """K₀⁻¹[:, :nx] of the equality-constrained gain matrix K₀ = [[G, Cᵀ], [C, 0]] built from a
    dense Cholesky inverse of G (the path for 800 < nx ≤ 6,000 unknowns) against scipy's sparse
    direct solver on K₀ itself (reference library), at the IEEE 118 solved state (pypower)."""
    import scipy.sparse as sp
    import scipy.sparse.linalg as spla

    from calibra.estimation.covariance import state_columns
    from calibra.estimation.measurements import StateLayout

    case = case118_solved
    model, _ = model_and_truth(case)
    net = case.network
    layout = StateLayout.build(net.n_bus, [net.reference_position])
    H = model.functions.jacobian(case.vm, case.va, layout)
    G = (H.T @ sp.diags(1.0 / model.sigma_pu ** 2) @ H).tocsc()
    C = model.constraints.jacobian(case.vm, case.va, layout).tocsr()
    nx, nc = G.shape[0], C.shape[0]
    assert nc > 0  # IEEE 118 has zero-injection buses
    K = sp.bmat([[G, C.T], [C, None]], format="csc")
    E = np.zeros((nx + nc, nx))
    E[np.arange(nx), np.arange(nx)] = 1.0
    reference = spla.spsolve(K, E)
    blocks = state_columns(G, C)
    assert blocks is not None
    P, M = blocks
    assert P.flags.c_contiguous and np.abs(P - P.T).max() <= 1e-12 * np.abs(P).max()
    ours = np.vstack([P, M])
    assert np.abs(ours - reference).max() <= 1e-8 * np.abs(reference).max()


def test_two_workers_give_the_results_of_one_to_the_bit():
    """Blocks are solved the same way wherever they run, so a period estimated on two worker
    processes equals the one-process result bit for bit (the issue's requirement; common
    practice, no source). Six hours of the sample week: four blocks."""
    from pathlib import Path

    from calibra.estimation.runtime import can_fork
    from calibra.estimation.topology import topology_per_snapshot
    from calibra.estimation.week import SolverSettings, estimate_period
    from calibra.io import load_site

    sample = Path(__file__).resolve().parents[2] / "sample_site"
    site = load_site(sample, start="2027-03-03 06:00", end="2027-03-03 11:59")
    model = MeasurementModel.from_points(site.network, site.points)
    z = model.to_per_unit(site.snapshots.reindex(columns=model.tags).to_numpy(float))
    status = topology_per_snapshot(site)
    one = estimate_period(Estimator(model), z, status, site.snapshots.index,
                          settings=SolverSettings(max_block=90), workers=1)
    two = estimate_period(Estimator(model), z, status, site.snapshots.index,
                          settings=SolverSettings(max_block=90), workers=2)
    assert can_fork(2) and len(z) == 360
    for a, b in ((one.vm, two.vm), (one.va, two.va), (one.residual, two.residual),
                 (one.omega, two.omega)):
        assert np.array_equal(a, b, equal_nan=True)
    pd.testing.assert_frame_equal(one.outcomes, two.outcomes)


def _without_bus(model, buses: tuple[str, ...]):
    """Rows of the points that see a radial bus of IEEE 57 (33, radial off 32)."""
    return [i for i, t in enumerate(model.tags)
            if t.startswith(tuple(f"{b}:" for b in buses) + ("32-33-1:", "32:p_inj", "32:q_inj"))]


def test_partly_observable_block_is_estimated_together():
    """Every snapshot misses the meters of bus 33: the block estimates the observable island
    together (not one by one), equal to the per-snapshot estimate, and says what it left out
    (common practice, no source)."""
    from pypower.api import case57

    case = solve_with_pypower(case57)
    model, Z = _varied_snapshots(case, 40, 8)
    Z[:, _without_bus(model, ("33",))] = np.nan
    estimator = Estimator(model)
    result = BlockSolver(estimator, model.network.default_in_service()).solve(Z)
    out = result.outcomes
    assert (out["method"] == "block").mean() > 0.9
    assert out["converged"].all() and not out["observable"].any()
    assert (out["buses_not_estimated"] == 1).all() and (out["islands"] == 1).all()
    lost = case.network.buses.index.get_loc("33")
    assert np.isnan(result.vm[:, lost]).all()
    for i in range(0, 40, 9):
        exact = estimator.estimate(Z[i])
        assert np.nanmax(np.abs(exact.vm - result.vm[i])) < 1e-6


def test_singular_iteration_matrix_falls_back_without_an_exception(case118_solved, monkeypatch):
    """A factorization that fails ('Factor is exactly singular', as SuperLU says) splits the
    block down to snapshots estimated alone; every snapshot still has an outcome with why."""
    import calibra.estimation.block as block

    model, Z = _varied_snapshots(case118_solved, 20, 9)

    def singular(*_args, **_kwargs):
        raise RuntimeError("Factor is exactly singular")

    monkeypatch.setattr(block, "kkt_solver", singular)
    result = BlockSolver(Estimator(model), model.network.default_in_service()).solve(Z)
    out = result.outcomes
    assert len(out) == 20 and out["converged"].all()
    assert (out["method"] == "single").all()
    assert out["reason"].str.contains("block iteration failed").all()
    assert out["reason"].str.contains("Factor is exactly singular").all()


def test_a_failing_block_is_reported_with_its_day_and_the_period_goes_on(case118_solved,
                                                                         monkeypatch):
    """Whatever goes wrong inside one block (here an error raised by the solver) becomes the
    outcome of that block's snapshots, naming the block; the other blocks are estimated."""
    import calibra.estimation.week as week

    model, Z = _varied_snapshots(case118_solved, 48, 10)
    index = pd.date_range("2027-03-01 22:20", periods=48, freq="5min", tz="UTC")
    original = week.BlockSolver.solve

    def flaky(self, Zb, confidence=0.99):
        if Zb.shape[0] == 20:  # the first block: 22:20-24:00 on the first day
            raise MemoryError("no room for the block")
        return original(self, Zb, confidence)

    monkeypatch.setattr(week.BlockSolver, "solve", flaky)
    status = np.repeat(model.network.default_in_service()[None, :], 48, axis=0)
    result = week.estimate_period(Estimator(model), Z, status, index, workers=1)
    out = result.outcomes
    first, second = out.iloc[:20], out.iloc[20:]
    assert (first["method"] == "failed").all() and not first["converged"].any()
    assert first["reason"].str.contains("2027-03-01 22:20 UTC").all()
    assert first["reason"].str.contains("MemoryError: no room for the block").all()
    assert second["converged"].all()
    assert np.isnan(result.vm[:20]).all() and np.isfinite(result.vm[20:]).all()
