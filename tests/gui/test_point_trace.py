"""Plot arrays of one point from a review (Qt-free), checked against the site's own files and
the simulator's seeded fault."""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd

from calibra.gui.point_trace import _add_model, point_trace, wall_clock_seconds
from tests.gui.conftest import REVERSED_TAGS, finite_equal

MW = REVERSED_TAGS[0]


def test_trace_of_a_reversed_point(reviewed, site_template):
    site, run = reviewed
    ev = run.result.evidence
    trace = point_trace(site, run.result, MW)
    i = ev.model.tags.get_loc(MW)
    assert finite_equal(trace.measured, ev.measured[:, i])
    assert finite_equal(trace.implied, ev.implied[:, i])
    assert trace.raw is None  # no correction in force: received = measured
    assert np.array_equal(trace.missing, np.isnan(trace.measured))
    # The point list as written (read here with pandas, not the project's loader): the band
    # is the accuracy class in % of full scale (common practice, no source).
    row = pd.read_csv(site_template / "points.csv", index_col="tag").loc[MW]
    assert trace.band == row["accuracy_pct"] / 100 * row["full_scale"]
    # The seeded fault negates the value (simulator ground truth): fitted slope near −1.
    assert trace.kind == "reversed" and abs(trace.slope + 1) < 0.02
    ok = np.isfinite(trace.implied)
    assert np.allclose(trace.model_residual[ok], (trace.slope - 1) * trace.implied[ok])
    x, y = trace.scatter(limit=100)
    assert len(x) == 100 and np.isfinite(x).all() and np.isfinite(y).all()


def test_wall_clock_axis_is_site_local_time(reviewed):
    site, run = reviewed
    trace = point_trace(site, run.result, MW)
    # The simulated day starts at 00:00 on 2027-03-01 in Europe/Oslo (the generator's start).
    assert trace.x[0] == pd.Timestamp("2027-03-01 00:00").timestamp()
    assert np.allclose(np.diff(trace.x), 60.0)
    # Across a daylight-saving change the wall clock jumps an hour (IANA tz rules).
    index = pd.DatetimeIndex(["2027-03-28 00:30", "2027-03-28 01:30"], tz="UTC")
    x = wall_clock_seconds(index, "Europe/Oslo")
    assert x[1] - x[0] == 7200.0


def test_open_branch_is_marked_not_missing(reviewed):
    site, run = reviewed
    ev = run.result.evidence
    element = site.points.at[MW, "element"]
    j = site.network.branches.index.get_loc(element)
    in_service = ev.in_service.copy()
    in_service[100:160, j] = False
    result = dataclasses.replace(run.result, evidence=dataclasses.replace(ev,
                                                                          in_service=in_service))
    trace = point_trace(site, result, MW)
    assert trace.out_of_service[100:160].all() and not trace.out_of_service[:100].any()
    assert not trace.missing[100:160].any()


def test_points_the_review_does_not_judge(reviewed):
    site, run = reviewed
    status = site.points.index[site.points["quantity"] == "branch_status"][0]
    assert point_trace(site, run.result, status) is None


def test_drift_and_stuck_models_over_time():
    t = np.linspace(0.0, 2.0, 9)
    base = dict(tag="X", unit="MW", x=t * 86400, measured=np.zeros(9), implied=np.ones(9),
                raw=None, band=1.0, missing=np.zeros(9, bool),
                out_of_service=np.zeros(9, bool), not_estimated=np.zeros(9, bool))
    from calibra.gui.point_trace import PointTrace

    drift = PointTrace(**base)
    _add_model(drift, "drift", {"drift_per_day": 1.2, "onset_days": 0.5}, t)
    assert np.allclose(drift.model_residual, 1.2 * np.maximum(t - 0.5, 0))
    assert drift.slope is None
    stuck = PointTrace(**base)
    _add_model(stuck, "stuck", {"value": 3.0, "onset_days": 1.0, "until_days": 1.5}, t)
    frozen = (t >= 1.0) & (t <= 1.5)
    assert np.allclose(stuck.model_residual[frozen], 2.0)
    assert np.isnan(stuck.model_residual[~frozen]).all()
    offset = PointTrace(**base)
    _add_model(offset, "offset", {"offset": 4.0}, t)
    assert offset.slope == 1.0 and offset.intercept == 4.0
