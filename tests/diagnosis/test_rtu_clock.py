"""RTU clocks: all points of one RTU stamped a constant time late are one ``time_offset``
finding with the offset, within one snapshot interval; no meter of the RTU is blamed for the
lag, a real meter fault on one of its points is still found, and a week without a clock error
(or with one drifting meter) gives no clock finding.

Networks: pypower's IEEE 57 and 118 bus cases (published test systems) through our simulator;
a clock that runs τ late stamps at t the value true at t − τ (the definition of a time offset;
common practice, no source)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from calibra.diagnosis.clock_fit import (
    fit_shift,
    misfits,
    regular_shifts,
    searched_misfits,
    shift_back,
)
from calibra.diagnosis.findings import FindingKind, findings_table
from calibra.diagnosis.review import review_site
from calibra.simulate.faults import FaultSpec
from calibra.simulate.telemetry import TelemetryOptions, lagged_values
from tests.diagnosis.scenarios import detectable_faults, generated_scenario
from tests.diagnosis.scoring import score


def _ramps(k: int, n: int, seed: int) -> np.ndarray:
    """Daily load cycles with a random walk on top, one column per point."""
    rng = np.random.default_rng(seed)
    t = np.arange(k) / 288.0
    base = 50 + 30 * np.sin(2 * np.pi * t)[:, None] * rng.uniform(0.5, 1.5, n)[None, :]
    return base + np.cumsum(rng.normal(0, 0.3, (k, n)), axis=0)


def _lagged_week(k: int, n: int, interval: float, lag: float, seed: int, noise_seed: int):
    """True values, readings ``lag`` intervals late with noise 0.2, times, noise, generator."""
    true = _ramps(k, n, seed)
    times = np.arange(k) * interval
    rng = np.random.default_rng(noise_seed)
    lagged = lagged_values(true, pd.to_datetime(times, unit="s"), lag * interval)
    return true, lagged + rng.normal(0, 0.2, (k, n)), times, np.full(n, 0.2), rng


@pytest.mark.parametrize("lag", [2.4, -1.3])
def test_joint_shift_recovers_a_known_lag_and_sees_none_without_one(lag):
    """Five points lagging 2.4 intervals (or leading 1.3): the fit finds it to a tenth;
    without a lag the shift is zero and not significant (the lag by construction)."""
    k, n, interval = 2016, 5, 300.0
    true, z, times, noise, rng = _lagged_week(k, n, interval, lag, 3, 4)
    regular = regular_shifts(times, interval, 6)
    fit = fit_shift(z, true, noise, regular, 6)
    assert abs(fit.steps - lag) < 0.1 and fit.whole_steps == round(lag)
    assert fit.t_stat > 10 and (fit.point_t > 2).all() and fit.stderr < 0.1
    clean = fit_shift(true + rng.normal(0, 0.2, (k, n)), true, noise, regular, 6)
    assert clean.whole_steps == 0 and abs(clean.steps) < 0.5


@pytest.mark.parametrize("lag", [0.0, 3.0, 7.6, -12.3, 29.4])
def test_coarse_to_fine_search_finds_the_minimum_of_every_shift(lag):
    """One-minute readings searched ±30 intervals: the coarse-to-fine misfits equal the
    misfits of every shift at each shift it computes, far fewer than all, and its best whole
    step is the best of all shifts. Reference: the exhaustive computation (common practice, no
    source)."""
    true, z, times, noise, _ = _lagged_week(2880, 4, 60.0, lag, 5, 6)
    regular = regular_shifts(times, 60.0, 30)
    full = misfits(z, true, noise, regular, 30, 24)
    fast = searched_misfits(z, true, noise, regular, 30, 24)
    computed = np.isclose(fast, full, rtol=1e-12, atol=0).all(axis=(1, 2))
    assert 19 <= computed.sum() < 61  # searched: far fewer than every shift
    assert computed[int(np.argmin(full.sum(axis=(1, 2))))]
    assert np.argmin(fast.sum(axis=(1, 2))) == np.argmin(full.sum(axis=(1, 2)))
    assert abs(fit_shift(z, true, noise, regular, 30).steps - lag) < 0.3


def test_moving_back_undoes_the_lag():
    """shift_back(lagged by τ, τ) gives the original series where both are defined; linear
    interpolation is exact for a straight line (common practice, no source)."""
    times = np.arange(50) * 60.0
    line = np.column_stack([3.0 * times + 7.0, -0.5 * times])
    index = pd.to_datetime(times, unit="s")
    late = lagged_values(line, index, 150.0)
    back = shift_back(late, times, 150.0, 60.0)
    ok = np.isfinite(back[:, 0])
    assert ok.sum() == 50 - 3 and np.isnan(back[-3:]).all()
    np.testing.assert_allclose(back[ok][3:], line[ok][3:], rtol=1e-12)


def _busiest_rtu(clean) -> str:
    """The RTU with the most power points in a simulated week."""
    pts = clean.site.points
    analog = pts[pts["quantity"].isin(["p_flow", "q_flow", "p_injection", "q_injection"])]
    return str(analog["rtu"].value_counts().index[0])


def _clock_findings(result) -> list:
    return [f for f in result.findings if f.finding == FindingKind.TIME_OFFSET]


@pytest.mark.parametrize("minutes", [3.0, 10.0])
def test_lagging_rtu_on_one_minute_data_is_one_finding(minutes):
    """IEEE 57, a day of one-minute data, no meter fault: one time_offset finding for the
    RTU with the lag to within one interval (60 s), and no finding on any of its points."""
    sim = generated_scenario("case57", 3, periods=1440, freq="1min", faults=False,
                             telemetry=TelemetryOptions(rtu_lag_minutes=minutes))
    rtu, lag = sim.rtu_lag
    result = review_site(sim.site)
    clocks = _clock_findings(result)
    assert [f.tag for f in clocks] == [rtu]
    assert abs(clocks[0].offset - lag) < 60.0, clocks[0].evidence
    assert clocks[0].rtu == rtu and clocks[0].unit == "s" and clocks[0].device == ""
    blamed = [f.tag for f in result.findings
              if f.finding != FindingKind.TIME_OFFSET and f.rtu == rtu
              and f.finding != FindingKind.UNVERIFIABLE]
    assert blamed == []
    assert result.summary.rtu_clocks == [rtu]


def test_lag_on_five_minute_data_with_meter_faults_on_and_off_the_rtu():
    """IEEE 118, three days of five-minute data, the busiest RTU 10 min late, the simulator's
    random fault mix plus a CT-ratio error (×1.25) on one point of the lagging RTU: the clock
    is found within one interval (300 s) and every detectable meter fault with the right kind,
    no false alarm."""
    clean = generated_scenario("case118", 4, periods=864, faults=False)
    rtu = _busiest_rtu(clean)
    pts = clean.site.points
    mine = pts[(pts["rtu"] == rtu) & (pts["quantity"] == "p_flow")]
    loaded = clean.true_values[mine.index].abs().median()
    victim = str(loaded.idxmax())
    sim = generated_scenario("case118", 4, periods=864, faults=[
        FaultSpec("scale", (victim,), factor=1.25)],
        telemetry=TelemetryOptions(rtu_lag_minutes=10.0, rtu_lag=rtu))
    result = review_site(sim.site)
    table = findings_table(result.findings)
    s = score(table, sim.truth, detectable_faults(sim))
    assert s.missed == [] and s.wrong_kind == [] and s.false_alarms == [], s.line()
    assert abs(s.clock_errors_s[rtu]) < 300.0
    found = table.set_index("tag")
    assert found.at[victim, "finding"] == "scale"
    assert abs(found.at[victim, "factor"] / 1.25 - 1) < 0.02


def test_clean_week_and_a_drifting_meter_give_no_clock():
    """IEEE 57, a week of five-minute data without a clock error, one drifting meter on the
    busiest RTU: the drift is found as a drift, no time_offset finding (one meter is not a
    clock)."""
    clean = generated_scenario("case57", 6, faults=False)
    rtu = _busiest_rtu(clean)
    pts = clean.site.points
    tag = str(pts[(pts["rtu"] == rtu) & (pts["quantity"] == "p_flow")].index[0])
    fs = float(pts.at[tag, "full_scale"])
    onset = clean.site.snapshots.index[600]
    sim = generated_scenario("case57", 6, faults=[
        FaultSpec("drift", (tag,), drift_per_day=0.01 * fs, onset=onset)])
    result = review_site(sim.site)
    assert _clock_findings(result) == []
    kinds = {f.tag: f.finding for f in result.findings}
    assert kinds.get(tag) == FindingKind.DRIFT


@pytest.mark.parametrize("unit", ["ns", "us", "s"])
def test_snapshot_interval_whatever_the_time_unit(unit):
    """pandas keeps times in ns, us or s: the interval is 300 s in each (common practice, no
    source)."""
    from calibra.diagnosis.rtu_clock import interval_seconds

    index = pd.date_range("2026-05-04", periods=6, freq="5min", tz="UTC").as_unit(unit)
    assert interval_seconds(index) == 300.0
