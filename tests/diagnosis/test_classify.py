"""Per-point classification (calibra.diagnosis.classify) on synthetic series."""

from __future__ import annotations

import numpy as np

from calibra.diagnosis.classify import PointSeries, classify_point


def _series(y_true: np.ndarray, z_true: np.ndarray, sigma: float, sigma_implied: float,
            seed: int = 3) -> PointSeries:
    rng = np.random.default_rng(seed)
    n = y_true.size
    t = np.arange(n) / 288.0  # five-minute snapshots, in days
    z = z_true + sigma * rng.normal(size=n)
    y = y_true + sigma_implied * rng.normal(size=n)
    return PointSeries(t, z, y, sigma, 0.057, sigma_implied)


def test_a_meter_of_a_bus_without_load_is_not_a_gain_of_zero():
    """A metered bus with no load reads about 0 while the implied value scatters by its own σ:
    the regression of z on y shrinks toward 0 (errors in variables, any regression text), so
    no gain may be claimed. Figures of an IEEE 300 bus: σ 0.019 MW, σ_implied 0.088 MW, class
    limit 0.057 MW."""
    zero = np.zeros(2016)
    d = classify_point(_series(zero, zero, 0.019, 0.088))
    assert d.kind == "healthy", d


def test_a_wrong_ratio_on_a_loaded_meter_is_still_a_gain():
    """The same meter on a loaded bus (5–9 MW over the day) with a CT ratio error of 0.8 is
    still found, with the factor within 1 %."""
    n = 2016
    load = 7.0 + 2.0 * np.sin(np.arange(n) * 2 * np.pi / 288)
    d = classify_point(_series(load, 0.8 * load, 0.019, 0.088))
    assert d.kind == "scale" and abs(d.params["factor"] - 0.8) < 0.008, d
