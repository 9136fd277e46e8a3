"""Writing a simulated site folder and reading it back with the site loader."""

import numpy as np
import pandas as pd
import pyarrow.parquet as pq

from calibra.io.site_folder import load_site
from calibra.simulate.metering import make_point_list
from calibra.simulate.telemetry import simulate_site
from calibra.simulate.writer import TRUTH_FILE, write_site


def test_round_trip_through_the_loader(grid57, tmp_path):
    points = make_point_list(grid57, seed=8)
    res = simulate_site(grid57, points, start="2027-10-30 20:00", periods=600,
                        timezone="Europe/Lisbon", seed=4, name="Round trip")
    # The period crosses the end of daylight saving time (31 Oct 2027 in Lisbon): times are
    # written in UTC, so the repeated local hour loses nothing.
    folder = write_site(res.site, tmp_path / "site", truth=res.truth)
    files = sorted(p.name for p in (folder / "snapshots").iterdir())
    assert files == ["2027-10-30.parquet", "2027-10-31.parquet"]
    schema = pq.read_schema(folder / "snapshots" / files[0])
    assert str(schema.field("timestamp").type) == "timestamp[ms, tz=UTC]"
    site = load_site(folder)
    assert not site.errors and site.name == "Round trip" and site.timezone == "Europe/Lisbon"
    assert len(site.snapshots) == len(res.site.snapshots)
    assert (site.snapshots.index == res.site.snapshots.index).all()
    got = site.snapshots[res.site.snapshots.columns].to_numpy()
    want = res.site.snapshots.to_numpy()
    assert (np.isnan(got) == np.isnan(want)).all()
    np.testing.assert_allclose(got, want, rtol=1e-6, atol=1e-6, equal_nan=True)  # float32
    net, ref = site.network, res.site.network
    assert net.reference_bus == ref.reference_bus and net.base_mva == ref.base_mva
    np.testing.assert_allclose(net.admittance_matrices()[0].toarray(),
                               ref.admittance_matrices()[0].toarray(), rtol=1e-12)
    assert list(site.points.index) == list(points.index)
    assert (site.points["device"] == points["device"]).all()
    truth = pd.read_csv(folder / TRUTH_FILE)
    assert list(truth["tag"]) == list(res.truth["tag"])
    onsets = pd.to_datetime(truth["onset"], utc=True)
    assert (onsets.to_numpy() == pd.DatetimeIndex(res.truth["onset"]).to_numpy()).all()
