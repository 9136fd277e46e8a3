"""Day-by-day estimation of a long period (calibra.estimation.daywise) and ``calibra estimate``."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from calibra.cli import main
from calibra.estimation.daywise import (
    RN_BIN_EDGES,
    PointTally,
    estimate_by_day,
    normalized_residuals,
    utc_days,
)
from calibra.estimation.measurement_model import MeasurementModel
from calibra.estimation.topology import checked_topology
from calibra.estimation.week import estimate_period
from calibra.estimation.wls import Estimator
from calibra.io import load_site

SAMPLE = Path(__file__).resolve().parents[2] / "sample_site"
# Crosses a UTC midnight and starts mid-day: two partial days.
START, END = "2027-03-02 18:00", "2027-03-03 04:00"


def test_days_give_the_same_estimates_as_one_call(tmp_path):
    """The blocks never cross a UTC day, so day-by-day results equal one call over the whole
    period (to the bit) — the property that lets a month run in a day's memory."""
    summary = estimate_by_day(SAMPLE, START, END, out_dir=tmp_path, workers=1)
    site = load_site(SAMPLE, start=START, end=END)
    model = MeasurementModel.from_points(site.network, site.points)
    z = model.to_per_unit(site.snapshots.reindex(columns=model.tags).to_numpy(float))
    status, _ = checked_topology(site, site.snapshots)
    whole = estimate_period(Estimator(model), z, status, site.snapshots.index, workers=1)
    files = sorted((tmp_path / "normalized_residuals").glob("*.parquet"))
    assert [f.stem for f in files] == ["2027-03-02", "2027-03-03"]
    written = pd.concat([pd.read_parquet(f) for f in files])
    assert written.index.equals(site.snapshots.index)
    assert list(written.columns) == list(model.tags)
    expected = normalized_residuals(whole)
    assert np.array_equal(np.isnan(written.to_numpy()), np.isnan(expected))
    assert np.array_equal(np.nan_to_num(written.to_numpy()), np.nan_to_num(expected))
    assert summary.snapshots == len(site.snapshots) == 601
    assert summary.converged == int(whole.outcomes["converged"].sum())
    assert summary.chi2_failed == int((~whole.outcomes["chi2_passed"].astype(bool)).sum())
    outcomes = pd.concat([pd.read_csv(f, index_col=0) for f in
                          sorted((tmp_path / "snapshots").glob("*.csv"))])
    assert len(outcomes) == 601 and outcomes["converged"].all()


def test_median_from_the_running_histogram_matches_numpy():
    """The per-point median |rN| from binned counts against numpy.median of all the values
    (reference): within half a bin, over several days folded in one at a time."""
    rng = np.random.default_rng(5)
    tally = PointTally(pd.Index(["a", "b", "c", "d"]))
    days = []
    for _ in range(5):
        day = np.column_stack([rng.normal(0, 1, 300), rng.normal(0, 1, 300) * 40,
                               rng.standard_t(3, 300) + 25, np.full(300, np.nan)])
        day[rng.random(day.shape) < 0.05] = np.nan
        tally.add(day.astype(np.float32))
        days.append(day)
    values = np.abs(np.vstack(days))
    median = tally.median()
    for j in range(3):
        exact = np.median(values[:, j][np.isfinite(values[:, j])])
        i = np.searchsorted(RN_BIN_EDGES, exact, side="right") - 1
        half_bin = (RN_BIN_EDGES[i + 1] - RN_BIN_EDGES[i]) / 2
        assert abs(median[j] - exact) <= half_bin + 1e-9
    assert np.isnan(median[3])
    frame = tally.frame()
    assert frame.loc["a", "samples"] == np.isfinite(values[:, 0]).sum()
    assert frame.loc["b", "max_abs_rn"] == pytest.approx(np.nanmax(values[:, 1]), rel=1e-6)
    assert frame.loc["a", "share_beyond"] == pytest.approx(
        np.mean(values[:, 0][np.isfinite(values[:, 0])] > 3))


def test_utc_days_cut_at_midnight_and_keep_the_period_ends():
    times = pd.date_range("2027-03-01 22:00", "2027-03-03 01:00", freq="1h", tz="UTC")
    start = pd.Timestamp("2027-03-01 23:00", tz="UTC")
    end = pd.Timestamp("2027-03-02 23:30", tz="UTC")
    days = utc_days(times, start, end)
    assert days[0] == (start, pd.Timestamp("2027-03-01 23:59:59.999999999", tz="UTC"))
    assert days[1] == (pd.Timestamp("2027-03-02", tz="UTC"), end)
    assert len(days) == 2


def test_estimate_command_summarises_and_writes_results(tmp_path, capsys):
    code = main(["estimate", str(SAMPLE), "--from", START, "--to", END, "--worst", "3",
                 "--out", str(tmp_path)])
    text = capsys.readouterr().out
    assert code == 0
    assert "estimated 601 snapshots (2 UTC days, one at a time)" in text
    assert "converged: 601 (100.0%)" in text
    assert "largest median |normalized residual|" in text
    assert "results: 4 files" in text
    assert len(list((tmp_path / "normalized_residuals").glob("*.parquet"))) == 2


def test_estimate_command_refuses_a_bad_time(capsys):
    assert main(["estimate", str(SAMPLE), "--from", "not a time"]) == 2
    assert "not a time" in capsys.readouterr().err


def test_history_opened_once_reads_each_period_as_a_load_would():
    """The reader behind ``estimate_by_day`` plans the files once; each period it reads must
    equal ``load_site(start=, end=)`` of that period (common practice, no source)."""
    from calibra.io.site_folder import open_history

    history = open_history(SAMPLE)
    whole = load_site(SAMPLE)
    assert history.times().equals(whole.snapshots.index.rename("timestamp"))
    assert history.base.snapshots.empty
    for a, b in utc_days(history.times(), pd.Timestamp(START, tz=whole.timezone),
                         pd.Timestamp(END, tz=whole.timezone)):
        part = history.load(a, b)
        reference = load_site(SAMPLE, start=a, end=b)
        pd.testing.assert_frame_equal(part.snapshots, reference.snapshots)
    with pytest.raises(ValueError):
        history.load(None, None)
