"""Tap positions: a telemetered tap that reads right gives no finding and leaves the meters
clean; a tap point offset by two steps, counting the wrong way, frozen, or a model with the
wrong step size is found as such; a transformer without tap telemetry whose tap moves is found
and no meter around it is blamed; a week with taps held gives no tap finding.

Networks: pypower's IEEE 57 bus case (a published test system) through our simulator, with a
moving on-load tap changer (step 1.25 %, ±4 steps following the load: our own choice, common
practice, no source). The implied-step logic is also checked on constructed runs (its
arithmetic: ratio = 1 + (step − neutral) × step% / 100, common practice, no source)."""

from __future__ import annotations

import functools

import numpy as np
import pytest

from calibra.diagnosis.findings import TAP_KINDS, FindingKind, findings_table
from calibra.diagnosis.review import review_site
from calibra.diagnosis.tap_positions import TapSettings, judge_tap_point, moving_ratio
from calibra.diagnosis.tap_ratios import RatioRun
from calibra.model.tap_changers import step_ratio
from calibra.simulate.tap_motion import OltcOptions
from calibra.simulate.telemetry import TelemetryOptions
from tests.diagnosis.scenarios import generated_scenario

CASE, SEED, PERIODS = "case57", 1, 576


def _runs(steps, implied, sd=0.0002, neutral=9, pct=1.25) -> list[RatioRun]:
    return [RatioRun(10 * i, 10 * i + 10, float(s), float(step_ratio(u, neutral, pct)), sd, 3)
            for i, (s, u) in enumerate(zip(steps, implied, strict=True))]


def test_judging_constructed_runs():
    """u = s: consistent; u = s − 2: offset +2; u = 18 − s: inverted; u = 9 + (s − 9)/2: step
    size 0.5; s constant while u moves: frozen (the definitions; common practice, no
    source)."""
    st = TapSettings()
    s = np.array([5, 6, 7, 8, 9, 10, 11, 12, 11, 10, 9, 8])
    rng = np.random.default_rng(1)
    wobble = rng.normal(0, 0.05, s.size)
    assert judge_tap_point(_runs(s, s + wobble), 9, 1.25, st)[0] is None
    kind, fig = judge_tap_point(_runs(s, s - 2 + wobble), 9, 1.25, st)
    assert kind == FindingKind.TAP_OFFSET and fig["offset_steps"] == 2
    assert judge_tap_point(_runs(s, 18 - s + wobble), 9, 1.25, st)[0] == \
        FindingKind.TAP_INVERTED
    kind, fig = judge_tap_point(_runs(s, 9 + (s - 9) / 2 + wobble), 9, 1.25, st)
    assert kind == FindingKind.TAP_STEP_SIZE and fig["slope"] == pytest.approx(0.5, abs=0.05)
    assert judge_tap_point(_runs(np.full(s.size, 7), s + wobble), 9, 1.25, st)[0] == \
        FindingKind.TAP_FROZEN
    # A ratio that steps back and forth moves; a monotone drift of a meter does not.
    daily = np.array([5, 6, 8, 10, 9, 7, 5, 6, 8, 10, 9, 7])
    assert moving_ratio(_runs(np.full(s.size, np.nan), daily + wobble), st)[0]
    drift = 9 + np.linspace(0, 2, s.size)
    assert not moving_ratio(_runs(np.full(s.size, np.nan), drift + wobble / 5), st)[0]


@functools.lru_cache(maxsize=8)
def _reviewed(fault: str = "", telemetered: bool = True, transformers: int = 1):
    oltc = OltcOptions(transformers=transformers, telemetered=telemetered, fault=fault)
    sim = generated_scenario(CASE, SEED, periods=PERIODS, faults=False,
                             telemetry=TelemetryOptions(oltc=oltc))
    result = review_site(sim.site)
    return sim, result, findings_table(result.findings)


def _meter_findings(table):
    return table[~table["finding"].isin([*TAP_KINDS, FindingKind.UNVERIFIABLE])]


def test_tap_really_moves_in_the_scenario():
    sim, _, _ = _reviewed()
    steps = sim.taps.steps[:, 0]
    assert steps.max() - steps.min() >= 4 and np.count_nonzero(np.diff(steps)) >= 8


def test_correct_tap_telemetry_gives_no_finding_and_clean_meters():
    _, result, table = _reviewed()
    assert [v.kind for v in result.taps.verdicts] == [None]
    assert not table["finding"].isin(TAP_KINDS).any()
    assert _meter_findings(table).empty, _meter_findings(table)[["tag", "finding"]]


@pytest.mark.parametrize("fault", [FindingKind.TAP_OFFSET, FindingKind.TAP_INVERTED,
                                   FindingKind.TAP_FROZEN, FindingKind.TAP_STEP_SIZE])
def test_tap_point_fault_is_found(fault):
    sim, _, table = _reviewed(fault)
    tag = sim.truth["tag"].iloc[0]
    row = table[table["tag"] == tag]
    assert list(row["finding"]) == [fault]
    if fault == FindingKind.TAP_OFFSET:
        assert row["offset"].iloc[0] == 2
    if fault == FindingKind.TAP_STEP_SIZE:  # the model states 2 × the true step
        assert row["factor"].iloc[0] == pytest.approx(0.5, abs=0.05)
    assert row["rtu"].iloc[0] == "" or "RTU" in row["rtu"].iloc[0]


def test_offset_tap_leaves_the_meters_clean():
    _, _, table = _reviewed(FindingKind.TAP_OFFSET)
    assert _meter_findings(table).empty, _meter_findings(table)[["tag", "finding"]]


def test_untelemetered_moving_tap_is_found_and_no_meter_blamed():
    sim, _, table = _reviewed(telemetered=False)
    branch = sim.taps.branches[0]
    row = table[table["finding"] == FindingKind.TAP_UNREPORTED]
    assert list(row["tag"]) == [branch] and list(row["element"]) == [branch]
    assert "steps back and forth" in row["evidence"].iloc[0]
    assert _meter_findings(table).empty, _meter_findings(table)[["tag", "finding"]]


def test_week_with_taps_held_gives_no_tap_finding():
    sim = generated_scenario(CASE, SEED, periods=PERIODS, faults=False)
    result = review_site(sim.site)
    table = findings_table(result.findings)
    assert result.taps.verdicts == []
    assert not table["finding"].isin(TAP_KINDS).any()
