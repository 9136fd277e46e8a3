"""How a reading is stored: the spread a stated deadband and resolution add to a point's σ,
and the checks of a stated value against the series.

The spreads are those of uniform errors (common practice, no source): a held reading's lag
anywhere within ±deadband, a rounding error anywhere within ±half a step; their standard
deviations are checked against scipy.stats.uniform.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import scipy.stats

from calibra.model.points import default_sigma, measurement_sigma, storage_spread
from calibra.model.reporting import reporting_disagreements
from tests.held_series import by_exception


def _points(deadband: float, resolution: float) -> pd.DataFrame:
    return pd.DataFrame({"full_scale": [200.0, 200.0], "accuracy_pct": [0.5, 0.5],
                         "deadband": [deadband, np.nan], "resolution": [resolution, np.nan]},
                        index=pd.Index(["A.P", "B.P"], name="tag"))


def test_storage_spread_is_that_of_uniform_errors():
    pts = _points(0.6, 0.1)
    lag = scipy.stats.uniform(loc=-0.6, scale=1.2).std()  # lag within ±deadband
    rounding = scipy.stats.uniform(loc=-0.05, scale=0.1).std()  # within ±half a step
    assert storage_spread(pts)["A.P"] == pytest.approx(np.hypot(lag, rounding), rel=1e-12)
    assert storage_spread(pts)["B.P"] == 0.0  # nothing stated: nothing added
    class_sigma = 0.5 / 100 * 200 / 3  # the class limit as 3σ (common practice, no source)
    sigma = measurement_sigma(pts)
    assert sigma["A.P"] == pytest.approx(np.sqrt(class_sigma ** 2 + lag ** 2 + rounding ** 2))
    assert sigma["B.P"] == pytest.approx(default_sigma(pts)["B.P"])


def test_a_point_list_without_the_columns_weighs_by_the_class_alone():
    pts = _points(0.6, 0.1).drop(columns=["deadband", "resolution"])
    assert (measurement_sigma(pts) == default_sigma(pts)).all()


def _wander(n: int = 1000, seed: int = 1) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return 100 + 5 * np.sin(np.arange(n) / 60) + np.cumsum(rng.normal(0, 0.05, n))


@pytest.mark.parametrize("stated, column", [(0.5, None), (2.0, "deadband"),
                                            (0.1, "deadband"), (0.0, "deadband")])
def test_a_stated_deadband_against_a_held_series(stated, column):
    found = reporting_disagreements(by_exception(_wander(), 0.5), stated, None, "MW")
    assert [d.column for d in found] == ([column] if column else [])
    if column is not None:
        assert found[0].shown >= 0.5 if stated < 0.5 else found[0].shown < 1.0


@pytest.mark.parametrize("stated, column", [(0.25, None), (0.01, "resolution"),
                                            (1.0, "resolution")])
def test_a_stated_resolution_against_a_series_on_a_grid(stated, column):
    on_grid = np.round(_wander() / 0.25) * 0.25
    found = reporting_disagreements(on_grid, None, stated, "MW")
    assert [d.column for d in found] == ([column] if column else [])


def test_too_short_a_series_says_nothing():
    assert reporting_disagreements(_wander(30), 5.0, 5.0, "MW") == []
