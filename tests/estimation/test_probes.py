"""Probe estimates with points left out (calibra.estimation.probes) against fresh estimates.

Reference: the WLS objective of a full per-snapshot Gauss-Newton estimate without the same
points (calibra's own estimator, itself checked against pypower's power flow and scipy's
least_squares in test_wls.py); the probe set must reach the same optimum by exact low-rank
updates (common practice, no source)."""

from __future__ import annotations

import numpy as np

from calibra.estimation.probes import ProbeSet
from calibra.estimation.wls import Estimator
from tests.estimation.conftest import model_and_truth


def test_trial_objectives_equal_fresh_estimates(case57_solved):
    model, z = model_and_truth(case57_solved)
    rng = np.random.default_rng(3)
    k = 3
    Z = z[None, :] + rng.normal(size=(k, z.size)) * model.sigma_pu[None, :]
    flows = np.flatnonzero(model.code == 0)
    bad = rng.choice(flows, 3, replace=False)
    Z[:, bad] += 25 * model.sigma_pu[bad]  # three gross errors (one WLS optimum per trial)
    Z[1, rng.choice(z.size, 5, replace=False)] = np.nan  # a few missing values
    status = np.repeat(model.network.default_in_service()[None, :], k, axis=0)
    estimator = Estimator(model)
    left_out = np.zeros(model.m, bool)
    left_out[bad[0]] = True
    probes = ProbeSet(estimator, Z, status, left_out, tolerance=1e-9)
    trials = []
    for extra in ([bad[1]], [bad[1], bad[2]], [int(flows[0])], []):
        t = left_out.copy()
        t[extra] = True
        trials.append(t)
    got = probes.objectives(trials)
    for t, value in zip(trials, got, strict=True):
        fresh = sum(estimator.estimate(np.where(t, np.nan, Z[j]), None, status[j],
                                       tolerance=1e-10).objective for j in range(k))
        assert abs(value - fresh) <= 1e-6 * max(fresh, 1.0), (value, fresh)
    # Leaving out the bad meters lowers the objective by far more than a healthy one.
    assert got[1] < got[0] < got[3] and got[2] > got[1]
