"""Residual analysis against bad-data theory (Handschin et al., IEEE Trans. PAS-94(2), 1975;
Abur & Gómez-Expósito, Power System State Estimation, 2004 — see shared REFERENCES.md)."""

from __future__ import annotations

import numpy as np
from scipy.stats import chi2

from calibra.estimation.measurement_model import MeasurementModel
from calibra.estimation.residuals import analyse_residuals, identify_bad_data
from calibra.estimation.wls import Estimator
from tests.estimation.conftest import full_point_list, model_and_truth


def test_trace_of_sensitivity_equals_degrees_of_freedom(case118_solved):
    """trace(S) = m − n (+ number of equality constraints) [R]."""
    model, z = model_and_truth(case118_solved)
    est_obj = Estimator(model)
    rng = np.random.default_rng(2)
    est = est_obj.estimate(z + rng.normal(size=z.size) * model.sigma_pu)
    a = analyse_residuals(est_obj, est)
    n_state = 2 * model.network.n_bus - 1
    assert est.dof == model.m - n_state + model.constraints.m
    assert abs(np.nansum(a.sensitivity_diag) - est.dof) < 1e-6


def test_objective_follows_chi_square(case14_solved):
    """Monte Carlo: mean of J(x̂) within 3 standard errors of m − n (χ² mean m − n, variance
    2(m − n)) [R]; the 99 % test rejects about 1 % of clean snapshots."""
    model, z = model_and_truth(case14_solved)
    estimator = Estimator(model)
    rng = np.random.default_rng(14)
    runs = 400
    objectives, passed = [], []
    for _ in range(runs):
        est = estimator.estimate(z + rng.normal(size=z.size) * model.sigma_pu,
                                 keep_jacobian=False)
        objectives.append(est.objective)
        passed.append(est.objective <= chi2.ppf(0.99, est.dof))
    dof = est.dof
    stderr = np.sqrt(2 * dof / runs)
    assert abs(np.mean(objectives) - dof) < 3 * stderr
    assert np.mean(passed) > 0.97


def test_chi_square_critical_values_match_tables():
    """χ² critical values from REFERENCES.md [C] (check with scipy.stats.chi2.ppf)."""
    table = {1: (3.841, 6.635), 2: (5.991, 9.210), 3: (7.815, 11.345), 5: (11.070, 15.086),
             10: (18.307, 23.209)}
    for dof, (c95, c99) in table.items():
        assert abs(chi2.ppf(0.95, dof) - c95) < 1e-3
        assert abs(chi2.ppf(0.99, dof) - c99) < 1e-3


def test_single_gross_error_identified_and_sized(case118_solved):
    """The largest normalized residual points at the one gross error and b̂ = r/S recovers its
    size within noise (b̂ has standard deviation σ/√S under the noise) [R]."""
    model, z = model_and_truth(case118_solved)
    estimator = Estimator(model)
    rng = np.random.default_rng(11)
    zn = z + rng.normal(size=z.size) * model.sigma_pu
    bad = int(np.flatnonzero(model.code == 0)[40])
    error = 25 * model.sigma_pu[bad]
    zn[bad] += error
    out = identify_bad_data(estimator, zn)
    first = out.removed[0]
    assert first.index == bad
    # Later removals, if any, are the noise tail: with ~1,000 gaussian residuals a few exceed 3.
    assert all(r.normalized_residual < 4.5 for r in out.removed[1:])
    est = estimator.estimate(zn)
    s = analyse_residuals(estimator, est).sensitivity_diag[bad]
    assert abs(first.estimated_error - error) < 4 * model.sigma_pu[bad] / np.sqrt(s)
    assert out.analysis.chi2_passed


def test_error_on_critical_measurement_is_undetectable(case57_solved):
    """A critical measurement has S = 0 and zero residual: its error cannot be detected and is
    not blamed on another meter [R]. Bus 33 of IEEE 57 hangs radially off bus 32; keep only the
    P and Q flows 32→33 to reach it (no meters at 33, none at the far end, no injection at
    32), so both are critical."""
    net = case57_solved.network
    pts = full_point_list(net)
    keep = ~pts.index.str.startswith(("33:", "32-33-1:to", "32:p_inj", "32:q_inj"))
    model = MeasurementModel.from_points(net, pts[keep])
    z = model.functions.evaluate(case57_solved.vm, case57_solved.va)
    rng = np.random.default_rng(8)
    zn = z + rng.normal(size=z.size) * model.sigma_pu
    crit = model.tags.get_loc("32-33-1:from:p_flow")
    zn[crit] += 0.3  # 30 MW gross error
    estimator = Estimator(model)
    est = estimator.estimate(zn)
    a = analyse_residuals(estimator, est)
    assert a.critical[crit]
    assert a.critical[model.tags.get_loc("32-33-1:from:q_flow")]
    assert abs(est.residual[crit]) < 1e-8
    out = identify_bad_data(estimator, zn)
    # Nobody is blamed for the 30 MW error: at most the noise tail crosses 3.
    assert crit not in [r.index for r in out.removed]
    assert all(r.normalized_residual < 4.5 for r in out.removed)


def test_minimal_redundancy_cannot_single_out_a_meter(case57_solved):
    """Two measurements that carry the only redundancy for a bus form a critical pair: their
    residuals are perfectly correlated and the test records that it cannot tell them apart
    [R: with m − n = 1 all normalized residuals are equal]. Bus 33 of IEEE 57 is reached only by
    the P flows at both ends of branch 32–33 (Q likewise)."""
    net = case57_solved.network
    pts = full_point_list(net)
    keep = ~pts.index.str.startswith(("33:", "32:p_inj", "32:q_inj"))
    model = MeasurementModel.from_points(net, pts[keep])
    z = model.functions.evaluate(case57_solved.vm, case57_solved.va)
    rng = np.random.default_rng(9)
    zn = z + rng.normal(size=z.size) * model.sigma_pu * 0.1
    i_from = model.tags.get_loc("32-33-1:from:p_flow")
    i_to = model.tags.get_loc("32-33-1:to:p_flow")
    zn[i_from] += 0.2
    out = identify_bad_data(Estimator(model), zn)
    assert out.removed, "the gross error must be detected"
    first = out.removed[0]
    assert first.index in (i_from, i_to)
    assert {first.index, *first.indistinguishable_from} >= {i_from, i_to}


def test_chi_square_threshold_matches_published_table():
    """Upper critical values of the chi-square distribution, NIST/SEMATECH e-Handbook of
    Statistical Methods, section 1.3.6.7.4 (table values to 3 decimals)."""
    from calibra.estimation.residuals import chi_square_threshold

    for confidence, dof, published in ((0.95, 10, 18.307), (0.99, 1, 6.635),
                                       (0.99, 30, 50.892), (0.95, 100, 124.342)):
        assert abs(chi_square_threshold(confidence, dof) - published) < 5e-4
