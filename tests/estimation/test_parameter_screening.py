"""Screening network parameters and meter errors by normalized Lagrange multipliers, and
telling a parameter error from meter errors, on published networks: pypower's power flow of the
true network (test-only reference) with a model that carries one wrong parameter."""

from __future__ import annotations

import numpy as np
import pytest

from calibra.estimation.measurement_model import MeasurementModel
from calibra.estimation.measurements import P_FLOW, Q_FLOW
from calibra.estimation.meter_or_model import Verdict, meter_or_model, separating_meters
from calibra.estimation.parameter_screening import branch_kinds, screen_terms
from calibra.estimation.parameter_terms import MeterError, MeterTerm
from calibra.estimation.parameters import sample_from_estimates, spread_positions
from calibra.estimation.residuals import analyse_residuals
from calibra.estimation.wls import Estimator
from calibra.model.parameters import NetworkParameter, model_value, with_parameters
from tests.estimation.conftest import full_point_list
from tests.estimation.parameter_cases import noise_free_values, solved_snapshots, wrong_model
from tests.estimation.test_parameters import _most_loaded


def _noisy_sample(solved, points, network, seed: int, count: int = 24, scale=None):
    """``count`` snapshots (the six loadings, repeated) with gaussian noise of the points' σ;
    ``scale``: (tag, factor) of a meter with a ratio error."""
    est = Estimator(MeasurementModel.from_points(network, points))
    z = np.repeat(noise_free_values(solved, points), 4, axis=0)
    if scale is not None:
        z[:, est.model.tags.get_loc(scale[0])] *= scale[1]
    rng = np.random.default_rng(seed)
    z = z + rng.standard_normal(z.shape) * est.model.sigma_pu
    ins = np.ones((z.shape[0], network.n_branch), bool)
    return est, sample_from_estimates(est, z, ins, spread_positions(z.shape[0], count))


def _all_parameters(network):
    return [NetworkParameter(b, k) for b in network.branches.index
            for k in branch_kinds(network, b)]


@pytest.mark.parametrize("case_name,which,kind,change", [
    ("case57", "line", "x", {"factor": 1.3}),
    ("case118", "transformer", "tap", {"offset": 0.025}),
])
def test_screening_ranks_the_wrong_parameter_first(case_name, which, kind, change):
    """Among every branch parameter and every meter's constant offset and scale, the wrong
    parameter has the largest normalized multiplier, far above 3, and the one-step estimate of
    its change has the right sign and size within 20 % (IEEE 57/118 from pypower; the rule
    "largest normalized multiplier" after Zhu & Abur 2006, from memory)."""
    solved = solved_snapshots(case_name)
    p = NetworkParameter(_most_loaded(solved, which), kind)
    wrong, true = wrong_model(solved, p, **change)
    est, sample = _noisy_sample(solved, full_point_list(solved.network), wrong, seed=1)
    meters = [MeterTerm((i,), k) for i in range(est.model.m) for k in MeterError]
    ranked = screen_terms(est.model, sample.snapshots, _all_parameters(wrong) + meters)
    assert ranked[0].term == p
    assert abs(ranked[0].multiplier) > 30
    wanted = true - model_value(wrong, p)
    assert ranked[0].step == pytest.approx(wanted, rel=0.2)


def test_correct_model_raises_no_parameter():
    """With the true model, no branch parameter's normalized multiplier exceeds 4.5 (each is
    standard normal under the model: the largest of ~200 stays below 4.5 but for a chance of
    about 1e-3; normal tail, common practice)."""
    solved = solved_snapshots("case57")
    est, sample = _noisy_sample(solved, full_point_list(solved.network), solved.network, seed=5)
    ranked = screen_terms(est.model, sample.snapshots, _all_parameters(solved.network))
    assert len(ranked) > 150
    assert abs(ranked[0].multiplier) < 4.5


def test_meter_offset_multiplier_is_the_normalized_residual(case14_solved):
    """For one snapshot, the normalized multiplier of a meter's constant offset equals that
    meter's normalized residual |r|/√Ω (a measurement's residual is its own multiplier: Zhu &
    Abur 2006, from memory; Ω from the residual analysis, Handschin et al. 1975)."""
    net = case14_solved.network
    points = full_point_list(net)
    model = MeasurementModel.from_points(net, points)
    estimator = Estimator(model)
    rng = np.random.default_rng(14)
    z = model.functions.evaluate(case14_solved.vm, case14_solved.va)
    z = z + rng.standard_normal(z.size) * model.sigma_pu
    sample = sample_from_estimates(estimator, z[None, :], np.ones((1, net.n_branch), bool))
    ranked = screen_terms(model, sample.snapshots,
                          [MeterTerm((i,), MeterError.OFFSET) for i in range(model.m)])
    analysis = analyse_residuals(estimator, estimator.estimate(z))
    for s in ranked:
        assert abs(s.multiplier) == pytest.approx(analysis.normalized[s.term.rows[0]],
                                                  rel=1e-5, abs=1e-6)


def test_single_snapshot_identifies_the_parameter_on_ieee14(case14_solved):
    """One snapshot of the IEEE 14-bus system (pypower's case14, from the IEEE archive),
    full metering with noise, the reactance of line 2-3 typed 30 % too large: its normalized
    multiplier exceeds 3 and is the largest among every branch parameter and every
    measurement's normalized residual — the identification Zhu & Abur 2006 describe (their
    rule from memory, not their numbers)."""
    net = case14_solved.network
    p = NetworkParameter("2-3-1", "x")
    wrong = with_parameters(net, {p: 1.3 * model_value(net, p)})
    points = full_point_list(net)
    model = MeasurementModel.from_points(wrong, points)
    z = MeasurementModel.from_points(net, points).functions.evaluate(case14_solved.vm,
                                                                       case14_solved.va)
    z = z + np.random.default_rng(2).standard_normal(z.size) * model.sigma_pu
    sample = sample_from_estimates(Estimator(model), z[None, :], np.ones((1, net.n_branch), bool))
    meters = [MeterTerm((i,), MeterError.OFFSET) for i in range(model.m)]
    ranked = screen_terms(model, sample.snapshots, _all_parameters(wrong) + meters)
    assert ranked[0].term == p
    assert abs(ranked[0].multiplier) > 3.0


def _one_end_metered(net, branch: str):
    """Full metering but the to end of ``branch`` and the injections at its two buses."""
    full = full_point_list(net)
    f, t = net.branches.loc[branch, ["from_bus", "to_bus"]]
    drop = [f"{branch}:to:p_flow", f"{branch}:to:q_flow"] + [
        f"{b}:{q}" for b in (f, t) for q in ("p_injection", "q_injection")]
    return full.drop(index=[d for d in drop if d in full.index])


def test_parameter_error_told_from_meters_with_full_metering():
    """IEEE 57, x of the most loaded line +30 %, both ends and the injections metered: the
    parameter explains the week far better than any one or two meter errors there."""
    solved = solved_snapshots("case57")
    p = NetworkParameter(_most_loaded(solved, "line"), "x")
    wrong, true = wrong_model(solved, p, factor=1.3)
    est, sample = _noisy_sample(solved, full_point_list(solved.network), wrong, seed=2)
    result = meter_or_model(est, sample, p)
    assert result.verdict == Verdict.MODEL
    assert abs(result.estimate.estimated_value - true) < 4 * result.estimate.std
    assert result.best.parameter_gain > 100 * result.threshold


def test_ct_ratio_and_reactance_not_separable_with_one_end_metered():
    """IEEE 118 transformer 8-5 (r = 0, no charging): with only its 8 end metered and no
    injection meters at its buses, a reactance 30 % off and a CT ratio error at the 8 end
    change the readings alike (S ∝ 1/x); they are reported as not separable, and the meter
    named that separates them is the flow at the transformer's other (5) end (physics of the π
    model; pypower's case118)."""
    solved = solved_snapshots("case118")
    net = solved.network
    p = NetworkParameter("8-5-1", "x")
    wrong, true = wrong_model(solved, p, factor=1.3)
    est, sample = _noisy_sample(solved, _one_end_metered(net, "8-5-1"), wrong, seed=1)
    result = meter_or_model(est, sample, p)
    assert result.verdict == Verdict.NOT_SEPARABLE
    shared = {est.model.tags[r] for m in result.best.meters for r in m.rows}
    assert "8-5-1:from:p_flow" in shared
    meters = separating_meters(est, result)
    assert meters[0].codes == (P_FLOW, Q_FLOW)
    assert meters[0].element == net.branches.index.get_loc("8-5-1") and meters[0].end == 1
    assert meters[0].expected_gain > 10 * result.threshold


def test_meter_ratio_error_is_not_taken_for_a_parameter():
    """IEEE 57 with the true model and the from-end active-power meter of the most loaded line
    reading 5 % high: the comparison for that line's reactance says "meter"."""
    solved = solved_snapshots("case57")
    branch = _most_loaded(solved, "line")
    est, sample = _noisy_sample(solved, full_point_list(solved.network), solved.network, seed=3,
                                scale=(f"{branch}:from:p_flow", 1.05))
    result = meter_or_model(est, sample, NetworkParameter(branch, "x"))
    assert result.verdict == Verdict.METER
    assert {est.model.tags[r] for r in result.best.meters[0].rows} == {f"{branch}:from:p_flow"}
