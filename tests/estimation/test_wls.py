"""The AC WLS estimator against pypower's power flow, scipy's least squares, and theory."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import least_squares

from calibra.estimation.measurement_model import MeasurementModel
from calibra.estimation.measurements import StateLayout
from calibra.estimation.wls import Estimator, EstimatorOptions
from calibra.model.network import Network
from tests.estimation.conftest import full_point_list, model_and_truth


@pytest.mark.parametrize("case_name", ["case57_solved", "case118_solved", "pegase89_solved",
                                       "iceland_solved"])
def test_noise_free_measurements_return_pypower_state(case_name, request):
    """Fed noise-free measurements from pypower's runpf (test-only reference), the estimator
    returns its state to 1e-6 pu / 1e-6 rad and holds every zero injection — on the IEEE cases
    and on published real models (PEGASE 89: phase shifters, taps far from 1; Iceland: a series
    capacitor, x = 1e-4 pu bus couplers; pandapower's networks)."""
    case = request.getfixturevalue(case_name)
    model, z = model_and_truth(case)
    est = Estimator(model).estimate(z)
    assert est.converged, est.reason
    assert np.abs(est.vm - case.vm).max() < 1e-6
    assert np.abs(est.va - case.va).max() < 1e-6
    assert est.constraint_mismatch < 1e-9


def _without_zero_injections(net: Network) -> Network:
    buses = net.buses.copy()
    buses["zero_injection"] = False
    return Network(net.name, net.base_mva, buses, net.branches.copy(), net.reference_bus)


def test_agrees_with_scipy_least_squares(case57_solved):
    """scipy.optimize.least_squares on the same weighted objective (no equality constraints, so
    the zero-injection buses carry measured injections instead) agrees to 1e-6."""
    net = _without_zero_injections(case57_solved.network)
    model = MeasurementModel.from_points(net, full_point_list(net))
    rng = np.random.default_rng(57)
    z = model.functions.evaluate(case57_solved.vm, case57_solved.va)
    z = z + rng.normal(size=z.size) * model.sigma_pu
    ours = Estimator(model).estimate(z)
    assert ours.converged
    layout = StateLayout.build(net.n_bus, [net.reference_position])

    def weighted_residual(x):
        vm, va = layout.apply_step(np.zeros(net.n_bus), np.zeros(net.n_bus), x)
        return (z - model.functions.evaluate(vm, va)) / model.sigma_pu

    def jac(x):
        vm, va = layout.apply_step(np.zeros(net.n_bus), np.zeros(net.n_bus), x)
        return -(model.functions.jacobian(vm, va, layout).toarray() / model.sigma_pu[:, None])

    x0 = layout.to_state(np.ones(net.n_bus), np.zeros(net.n_bus))
    ref = least_squares(weighted_residual, x0, jac=jac, method="lm", xtol=1e-15, ftol=1e-15,
                        gtol=1e-15, max_nfev=200)
    vm_ref, va_ref = layout.apply_step(np.zeros(net.n_bus), np.zeros(net.n_bus), ref.x)
    assert np.abs(ours.vm - vm_ref).max() < 1e-6
    assert np.abs(ours.va - va_ref).max() < 1e-6
    assert abs(ours.objective - 2 * ref.cost) < 1e-6 * ours.objective


def test_zero_injection_exact_where_heavy_weights_fail(case14_solved, case118_solved):
    """Heavy weights (variance 1e-20) for zero injections make the gain matrix nearly singular
    (condition > 1e15; a well-known fact of the trade, common practice); the constrained
    estimate holds the injections below 1e-9 pu (IEEE 14 bus 7, IEEE 118)."""
    for case in (case14_solved, case118_solved):
        model, z = model_and_truth(case)
        rng = np.random.default_rng(1)
        zn = z + rng.normal(size=z.size) * model.sigma_pu
        est = Estimator(model).estimate(zn)
        assert est.converged
        inj = model.constraints.evaluate(est.vm, est.va)
        assert np.abs(inj).max() < 1e-9
        H = est.jacobian.toarray()
        C = est.constraint_jacobian.toarray()
        G_heavy = H.T @ (H / model.sigma_pu[est.used][:, None] ** 2) + C.T @ C / 1e-20
        assert np.linalg.cond(G_heavy) > 1e15
    net14 = case14_solved.network
    assert list(net14.buses.index[net14.zero_injection_positions]) == ["7"]  # REFERENCES.md


def test_robust_estimate_resists_several_gross_errors(case118_solved):
    """Huber M-estimation (Huber 1964, from memory): three gross errors in one snapshot pull the
    plain WLS state away; the robust estimate stays within a small fraction of that shift."""
    model, z = model_and_truth(case118_solved)
    rng = np.random.default_rng(7)
    zn = z + rng.normal(size=z.size) * model.sigma_pu
    flows = np.flatnonzero(model.code == 0)
    for i in rng.choice(flows, 3, replace=False):
        zn[i] = -zn[i] + 0.5 * np.sign(zn[i] or 1.0)
    plain = Estimator(model).estimate(zn)
    robust = Estimator(model, EstimatorOptions(robust=True)).estimate(zn)
    assert robust.converged
    def state_error(e):
        return np.abs(e.vm - case118_solved.vm).max() + np.abs(e.va - case118_solved.va).max()

    assert state_error(robust) < 0.3 * state_error(plain)


def test_unobservable_area_is_reported_and_rest_estimated(case57_solved):
    """Remove every measurement touching a group of buses: the estimator says which buses it
    cannot estimate and converges on the observable part (common practice, no source)."""
    case = case57_solved
    net = case.network
    model, z = model_and_truth(case)
    cut_buses = {"31", "32", "33"}
    adm = net.branch_admittances()
    f = net.buses.index[adm.f].to_numpy()
    t = net.buses.index[adm.t].to_numpy()
    touching = np.zeros(model.m, bool)
    for i, tag in enumerate(model.tags):
        el = tag.split(":")[0]
        if el in cut_buses:
            touching[i] = True
        elif el in net.branches.index:
            pos = net.branches.index.get_loc(el)
            touching[i] = f[pos] in cut_buses or t[pos] in cut_buses
    est = Estimator(model).estimate(np.where(touching, np.nan, z))
    assert est.converged
    assert not est.observability.observable
    lost = set(net.buses.index[~est.observability.estimated_buses])
    # In IEEE 57, bus 31 stays tied to the rest by the injection measured at bus 30 and bus 32
    # by the zero injection at bus 34; bus 33 hangs radially off 32 and is lost.
    assert lost == {"33"}
    ok = est.observability.estimated_buses
    assert np.abs(est.vm[ok] - case.vm[ok]).max() < 1e-6
    assert "observable" in est.reason
