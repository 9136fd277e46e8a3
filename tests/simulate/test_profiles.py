"""Load and generation profiles, snapshot times and planned outages."""

import numpy as np
import pandas as pd

from calibra.simulate.profiles import (
    choose_planned_outage,
    load_profiles,
    make_operating_series,
)
from calibra.simulate.telemetry import snapshot_index


def test_snapshot_index_starts_at_local_midnight_in_utc():
    idx = snapshot_index("2027-03-01 00:00", 10080, "Europe/Oslo")
    assert len(idx) == 10080 and str(idx.tz) == "UTC"
    assert (idx[1:] - idx[:-1] == pd.Timedelta(minutes=1)).all()
    local = idx.tz_convert("Europe/Oslo")
    assert local[0] == pd.Timestamp("2027-03-01 00:00", tz="Europe/Oslo")
    assert local[0].day_of_week == 0  # Monday


def test_daily_and_weekly_shapes_follow_local_time():
    idx = snapshot_index("2027-03-01", 10080, "Asia/Tokyo")
    homes = np.array([[1.0, 0.0, 0.0]])
    offices = np.array([[0.0, 1.0, 0.0]])
    for tz in ("Asia/Tokyo", "America/Chicago"):
        rng = np.random.default_rng(0)
        res = load_profiles(idx, tz, 1, rng, mix=homes)[:, 0]
        hour = idx.tz_convert(tz).hour
        hourly = pd.Series(res).groupby(np.asarray(hour)).mean()
        assert 17 <= hourly.idxmax() <= 21  # household evening peak, local time
        assert 2 <= hourly.idxmin() <= 5  # night trough
    rng = np.random.default_rng(1)
    work = load_profiles(idx, "Asia/Tokyo", 1, rng, mix=offices)[:, 0]
    local = idx.tz_convert("Asia/Tokyo")
    day = np.asarray((local.hour >= 10) & (local.hour < 16))
    weekend = np.asarray(local.day_of_week >= 5)
    assert work[day & ~weekend].mean() > 1.5 * work[day & weekend].mean()


def test_generation_follows_load_and_slack_covers_losses(grid57):
    idx = snapshot_index("2027-05-03", 2880, "Europe/Madrid")
    ops = make_operating_series(grid57, idx, "Europe/Madrid", np.random.default_rng(4))
    total_load = ops.load_mw.sum(axis=1)
    dispatch = grid57.pv.to_numpy() & (grid57.gen_mw.to_numpy() > 0)
    gen = ops.gen_mw[:, dispatch].sum(axis=1)
    assert np.corrcoef(total_load, gen)[0, 1] > 0.95
    assert total_load.max() / total_load.min() > 1.4  # a real daily swing
    assert (ops.load_mw <= grid57.load_mw.to_numpy() * 1.15 + 1e-9).all()


def test_planned_outage_keeps_the_grid_whole(grid118):
    idx = snapshot_index("2027-03-01", 10080, "America/Chicago")
    out = choose_planned_outage(grid118, idx, "America/Chicago", np.random.default_rng(2),
                                hours=5)
    assert out is not None
    local = out.start.tz_convert("America/Chicago")
    assert 1 <= local.day_of_week <= 3 and local.hour == 8
    assert out.end - out.start == pd.Timedelta(hours=5)
    status = grid118.network.default_in_service().copy()
    status[grid118.network.branch_positions([out.branch])[0]] = False
    assert len(np.unique(grid118.network.islands(status))) == 1
    assert grid118.network.branches.at[out.branch, "kind"] == "line"
