"""The fault-free sample week against estimation theory (issue: sample site checks).

Chi-square test (Handschin et al., IEEE Trans. PAS-94(2), 1975; Abur & Gómez-Expósito 2004):
with correct models and noise, J(x̂) exceeds the 99 % point of χ²(m − n) in about 1 % of
snapshots; normalized residuals are standard normal, so |rᴺ| > 3 occurs with probability
2·(1 − Φ(3)) = 0.27 % (scipy.stats.norm).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import norm

from calibra.estimation.measurement_model import MeasurementModel
from calibra.estimation.topology import topology_per_snapshot
from calibra.estimation.week import estimate_period
from calibra.estimation.wls import Estimator
from calibra.simulate.sample_site import simulate_sample


@pytest.fixture(scope="module")
def clean_week():
    sim = simulate_sample(faults=False)
    site = sim.site
    model = MeasurementModel.from_points(site.network, site.points)
    z = model.to_per_unit(site.snapshots.reindex(columns=model.tags).to_numpy(float))
    period = estimate_period(Estimator(model), z, topology_per_snapshot(site))
    return sim, period


def test_clean_week_passes_chi_square(clean_week):
    """At least 97 % of observable snapshots pass the 99 % chi-square test."""
    sim, period = clean_week
    assert sim.truth.empty
    out = period.outcomes
    observable = out["converged"].astype(bool) & out["observable"].astype(bool)
    passed = out.loc[observable, "chi2_passed"].astype(bool).mean()
    assert passed >= 0.97, passed
    assert observable.mean() > 0.95


def test_large_normalized_residuals_at_the_normal_rate(clean_week):
    """|rᴺ| > 3 at about the rate the normal distribution predicts (0.27 %); historian
    rounding and the block engine's Ω approximation allow a factor of two."""
    _, period = clean_week
    with np.errstate(divide="ignore", invalid="ignore"):
        rn = np.abs(period.residual) / np.sqrt(period.omega)
    rn = rn[np.isfinite(rn)]
    expected = 2 * (1 - norm.cdf(3.0))
    rate = float((rn > 3.0).mean())
    assert rn.size > 1_000_000
    assert expected / 2 < rate < 2 * expected, rate
