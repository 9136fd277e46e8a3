"""The bundled sample site folder: complete, loadable, with the seeded faults it promises."""

import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from calibra.io.site_folder import load_site
from calibra.model.points import parse_ratio
from calibra.simulate.metering import MULTI_RATIO_CT_TAPS
from calibra.simulate.redundancy import redundancy_report
from calibra.simulate.sample_site import COMMISSIONING, simulate_sample, tarrowmere_case
from calibra.simulate.writer import TRUTH_FILE

FOLDER = Path(__file__).resolve().parents[2] / "sample_site"


@pytest.fixture(scope="module")
def sample():
    t0 = time.perf_counter()
    site = load_site(FOLDER)
    return site, time.perf_counter() - t0, pd.read_csv(FOLDER / TRUTH_FILE)


def test_folder_loads_quickly_with_a_week_of_minutes(sample):
    site, seconds, _ = sample
    assert seconds < 5.0
    assert not site.problems
    assert len(site.snapshots) == 10_080
    local = site.snapshots.index.tz_convert(site.timezone)
    assert local[0].day_of_week == 0 and local[0].hour == 0 and local[0].minute == 0
    assert (site.snapshots.index[1:] - site.snapshots.index[:-1] == pd.Timedelta("1min")).all()
    size = sum(p.stat().st_size for p in FOLDER.rglob("*") if p.is_file())
    assert size <= 20e6
    net = site.network
    assert 40 <= net.n_bus <= 80 and 10 <= net.buses["substation"].nunique() <= 15
    assert set(net.buses["kv"]) == {220.0, 110.0, 33.0}
    assert net.buses["zero_injection"].sum() >= 3
    assert (net.branches["tap"] != 1).sum() >= 3 and (net.buses["b_shunt_mvar"] > 0).sum() >= 3
    pairs = net.branches[["from_bus", "to_bus"]].apply(tuple, axis=1)
    assert pairs.duplicated().any()  # parallel circuits


def test_truth_lists_the_required_faults(sample):
    site, _, truth = sample
    pts = site.points
    faults = truth.groupby("fault").agg(
        kind=("kind", "first"), tags=("tag", list), factor=("factor", "first"),
        onset=("onset", "first"), drift=("drift_per_day", "first"),
    )
    qty = {f: set(pts.loc[t, "quantity"]) for f, t in faults["tags"].items()}
    rev = faults[faults["kind"] == "reversed"]
    assert sum(qty[f] == {"p_flow", "q_flow"} for f in rev.index) >= 2  # whole devices
    assert any(len(t) == 1 for t in rev["tags"])  # a single channel
    assert any(qty[f] == {"p_injection", "q_injection"} for f in rev.index)  # an injection
    scale = faults[faults["kind"] == "scale"]
    ct = [f for f in scale.index if "p_flow" in qty[f]]
    assert ct
    # The CT error is the ratio of two taps of one IEEE C57.13 multi-ratio CT (REFERENCES.md).
    tag = scale.at[ct[0], "tags"][0]
    configured = round(parse_ratio(pts.at[tag, "ct_ratio"]) * 5)
    wired = configured / scale.at[ct[0], "factor"]
    assert any({configured, round(wired)} <= set(t) for t in MULTI_RATIO_CT_TAPS.values())
    vt = [f for f in scale.index if qty[f] == {"v_magnitude"}]
    assert vt and min(abs(scale.at[vt[0], "factor"] - s) for s in (3**0.5, 3**-0.5)) < 1e-9
    drift = faults[faults["kind"] == "drift"]
    assert len(drift) >= 2 and drift["onset"].nunique() >= 2 and drift["drift"].nunique() >= 2
    for kind in ("offset", "stuck", "noisy", "mismapped"):
        assert (faults["kind"] == kind).any(), kind
    # Most faults sit in the substation being commissioning; its points come last.
    where = truth.groupby("fault")["tag"].first().map(pts["substation"])
    assert (where == COMMISSIONING).sum() > len(where) / 2 and (where != COMMISSIONING).any()
    new = (pts["substation"] == COMMISSIONING).to_numpy()
    assert new[-new.sum():].all() and (pts.loc[new, "note"] == "commissioning").all()


def test_faults_are_detectable_and_one_area_is_critical(sample):
    site, _, truth = sample
    base = tarrowmere_case().solve()
    rep = redundancy_report(site.network, site.points, base.vm, base.va_rad)
    assert rep.observable and rep.critical
    assert not set(truth["tag"]) & rep.unidentifiable
    assert rep.residual_sensitivity[truth["tag"]].min() > 0.1


def test_folder_is_what_the_generator_makes(sample):
    site, _, truth = sample
    again = simulate_sample(seed=7)
    expected = again.truth.drop(columns="onset").replace("", np.nan)
    pd.testing.assert_frame_equal(expected, truth.drop(columns="onset"), check_dtype=False)
    onsets = pd.to_datetime(truth["onset"], utc=True).to_numpy()
    assert (onsets == pd.DatetimeIndex(again.truth["onset"]).to_numpy()).all()
    assert list(again.site.points.index) == list(site.points.index)
    got = site.snapshots[again.site.points.index].to_numpy()
    np.testing.assert_allclose(got, again.site.snapshots.to_numpy(), rtol=1e-6, atol=1e-6,
                               equal_nan=True)
