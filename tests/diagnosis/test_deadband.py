"""Readings stored by exception (a deadband) and coarse converters: a healthy meter held within
its deadband is never stuck, drifting, noisy or offset; a fault beyond it is still found.

The storage rule is the usual report-by-exception one: a new value is stored when it differs
from the last stored value by more than the deadband; in between the historian repeats the last
stored value (common practice, no source)."""

from __future__ import annotations

import numpy as np
import pytest

from calibra.diagnosis.classify import PointSeries, classify_point
from calibra.diagnosis.findings import findings_table
from calibra.diagnosis.review import period_days, point_series, review_site
from calibra.model.points import analog_points
from calibra.model.reporting import reading_resolution, reporting_deadband
from calibra.simulate.metering import MeteringOptions
from calibra.simulate.telemetry import TelemetryOptions
from tests.diagnosis.scenarios import detectable_faults, generated_scenario
from tests.diagnosis.scoring import score
from tests.held_series import by_exception


def _voltage_week(n: int = 2016, seed: int = 5) -> tuple[np.ndarray, np.ndarray]:
    """A 138 kV bus voltage over a week of five-minute snapshots: a slow daily swing of ±0.8 kV
    and a little true movement; the implied value carries its own σ."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) / 288.0
    true = 139.0 + 0.8 * np.sin(2 * np.pi * t) + np.cumsum(rng.normal(0, 0.01, n))
    return t, true


def test_the_deadband_is_read_from_the_series():
    t, true = _voltage_week()
    rng = np.random.default_rng(1)
    measured = true + rng.normal(0, 0.05, true.size)
    assert reporting_deadband(measured) == 0.0  # full resolution: no deadband
    held = by_exception(measured, 0.5)
    assert 0.5 <= reporting_deadband(held) <= 0.65
    # a converter step of 0.04 kV and no deadband: the step (values repeat at slow change)
    slow = np.round(true / 0.04) * 0.04
    assert reporting_deadband(slow) == pytest.approx(0.04, rel=1e-6)


@pytest.mark.parametrize("case_name, seed", [("case57", 1), ("case118", 1)])
def test_report_by_exception_week_gives_no_false_alarm(case_name, seed):
    """IEEE 57 and 118 (pypower's case files), 3.5 days of five-minute snapshots stored with a
    0.3 % of full scale deadband and 12-bit readings: on 138 kV buses the deadband (0.5 kV) is
    wider than the 0.2 % class limit, and the held lag read as a drift (IEEE 57) and as noise
    (IEEE 118) until the deadband entered the expected error. Every seeded fault is still
    found with its kind."""
    sim = generated_scenario(case_name, seed, periods=1008,
                             telemetry=TelemetryOptions(deadband_pct=0.3, resolution_bits=12))
    result = review_site(sim.site)
    s = score(findings_table(result.findings), sim.truth, detectable_faults(sim))
    assert s.false_alarms == [] and s.missed == [] and s.wrong_kind == [], (
        s.line(), s.false_alarms, s.missed, s.wrong_kind)


def test_an_offset_beyond_class_limit_and_deadband_is_still_found():
    t, true = _voltage_week()
    rng = np.random.default_rng(9)
    z = by_exception(true + 2.0 + rng.normal(0, 0.11, true.size), 0.5)
    y = true + rng.normal(0, 0.05, true.size)
    d = classify_point(PointSeries(t, z, y, 0.11, 0.332, 0.05, deadband=reporting_deadband(z)))
    assert d.kind == "offset" and abs(d.params["offset"] - 2.0) < 0.3, d


# --------------------------------------------------------------- resolution and stated values
def test_the_resolution_is_read_from_the_grid_of_the_values():
    t, true = _voltage_week()
    rng = np.random.default_rng(2)
    measured = true + rng.normal(0, 0.05, true.size)
    assert reading_resolution(measured) == 0.0  # full resolution: no grid to see
    # a 12-bit converter spanning ±165.6 kV: steps of 2 × 165.6 / 4096 = 0.0809 kV
    step = 2 * 165.6 / 2 ** 12
    on_grid = np.round(measured / step) * step
    assert reading_resolution(on_grid) == pytest.approx(step, rel=1e-3)
    # the historian rounds the converter's step to 0.01 kV: gaps of 0.08 and 0.09 kV
    assert 0.079 <= reading_resolution(np.round(on_grid, 2)) <= 0.081
    # held by exception on the grid: the values still return to the grid's levels
    held = by_exception(on_grid, 0.5)
    assert reading_resolution(held) == pytest.approx(step, rel=1e-3)
    assert reading_resolution(by_exception(measured, 0.5)) == 0.0


def test_a_coarse_grid_makes_no_healthy_meter_noisy():
    """A healthy 0.2 % class meter (σ 0.05 kV) read by a coarse converter (1.0 kV steps): the
    rounding error, uniform within ±half a step (σ = step/√12 = 0.29 kV; common practice, no
    source), is 6 times the class σ. Judged without it the meter is flagged (its reading holds
    while the voltage swings within a step: stuck)."""
    t, true = _voltage_week()
    rng = np.random.default_rng(4)
    z = np.round((true + rng.normal(0, 0.05, true.size)) / 1.0) * 1.0
    y = true + rng.normal(0, 0.02, true.size)
    without = classify_point(PointSeries(t, z, y, 0.05, 0.15, 0.02))
    assert without.kind == "stuck"
    inferred = classify_point(PointSeries(t, z, y, 0.05, 0.15, 0.02,
                                          resolution=reading_resolution(z)))
    stated = classify_point(PointSeries(t, z, y, 0.05, 0.15, 0.02, resolution=1.0))
    assert inferred.kind == "healthy" and stated.kind == "healthy"
    # an offset beyond class limit, half a step and the deadband is still found
    shifted = classify_point(PointSeries(t, z + 3.0, y, 0.05, 0.15, 0.02, resolution=1.0))
    assert shifted.kind == "offset" and abs(shifted.params["offset"] - 3.0) < 0.3


@pytest.mark.parametrize("case_name, seed", [("case57", 2), ("case118", 1)])
def test_stated_deadband_and_resolution_in_the_point_list(case_name, seed):
    """IEEE 57 and 118 (pypower's case files), 3.5 days of five-minute snapshots stored with a
    0.3 % deadband and 12-bit readings, the point list stating both (the simulator's
    ``state_storage``): no healthy meter stuck, noisy or otherwise flagged, every seeded fault
    found with its kind, and the stated values are what each point is judged with."""
    sim = generated_scenario(case_name, seed, periods=1008, telemetry=TelemetryOptions(
        deadband_pct=0.3, resolution_bits=12, state_storage=True))
    points = sim.site.points
    analog = analog_points(points)
    assert analog["deadband"].notna().all() and analog["resolution"].notna().all()
    result = review_site(sim.site)
    s = score(findings_table(result.findings), sim.truth, detectable_faults(sim))
    assert s.false_alarms == [] and s.missed == [] and s.wrong_kind == [], (
        s.line(), s.false_alarms, s.missed, s.wrong_kind)
    ev = result.evidence
    t_days = period_days(ev)
    for i in range(0, ev.model.m, 97):
        tag = ev.model.tags[i]
        ps = point_series(sim.site, ev, t_days, i)
        assert ps.deadband == points.at[tag, "deadband"]
        assert ps.resolution == points.at[tag, "resolution"]
        assert ps.stated == ("deadband", "resolution")


def test_a_crossed_point_held_within_its_deadband_is_not_called_stuck():
    """pandapower's Icelandic grid (a published network, test-only reference) with sparse
    field metering (each branch end metered with chance 0.55), 3.5 days of five-minute
    snapshots stored with a stated 0.3 % deadband and 12-bit readings. A crossed point there
    (S125.132.S123-1.MW) reads a quantity that moves within its deadband: it holds while its
    own implied value moves, and was reported stuck while a frozen fit was never compared with
    the crossed-point match. Every seeded fault is found with its kind, no false alarm."""
    sim = generated_scenario(
        "iceland", 2, periods=1008,
        metering=MeteringOptions(branch_end_coverage=0.55, independent_ends=True),
        telemetry=TelemetryOptions(deadband_pct=0.3, resolution_bits=12, state_storage=True))
    assert "mismapped" in set(sim.truth["kind"])
    result = review_site(sim.site)
    s = score(findings_table(result.findings), sim.truth, detectable_faults(sim))
    assert s.false_alarms == [] and s.missed == [] and s.wrong_kind == [], (
        s.line(), s.false_alarms, s.missed, s.wrong_kind)
