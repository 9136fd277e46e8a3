"""Fault application: each kind changes exactly its columns from its onset, as specified."""

import numpy as np
import pandas as pd
import pytest

from calibra.model.points import default_sigma
from calibra.simulate.faultmix import random_faults, wrong_ct_taps
from calibra.simulate.faults import FAULT_KINDS, FaultSpec, apply_faults
from calibra.simulate.metering import MULTI_RATIO_CT_TAPS, make_point_list
from calibra.simulate.telemetry import TelemetryOptions, simulate_site


@pytest.fixture()
def frame():
    tags = ["A.P", "A.Q", "B.P", "B.Q", "C.V", "D.I"]
    points = pd.DataFrame(
        {
            "quantity": ["p_flow", "q_flow", "p_flow", "q_flow", "v_magnitude", "i_magnitude"],
            "device": ["A", "A", "B", "B", "C", "D"],
            "full_scale": [300.0, 300.0, 150.0, 150.0, 132.0, 600.0],
            "accuracy_pct": [0.5, 0.5, 1.0, 1.0, 0.2, 0.5],
        },
        index=pd.Index(tags, name="tag"),
    )
    index = pd.date_range("2027-03-01", periods=2880, freq="1min", tz="UTC")
    rng = np.random.default_rng(3)
    values = pd.DataFrame(rng.normal(50, 10, (len(index), len(tags))), index=index, columns=tags)
    return points, values


ONSET = pd.Timestamp("2027-03-01 18:30", tz="UTC")


def _changed(before, after):
    return (before != after).any(axis=0)


@pytest.mark.parametrize(
    "spec, expected",
    [
        (FaultSpec("reversed", ("A.P", "A.Q"), factor=-1.0, onset=ONSET), lambda v, d: -v),
        (FaultSpec("reversed", ("B.Q",), factor=-1.0, onset=ONSET), lambda v, d: -v),
        (FaultSpec("scale", ("A.P", "A.Q"), factor=1200 / 800, onset=ONSET),
         lambda v, d: v * 1.5),
        (FaultSpec("scale", ("C.V",), factor=np.sqrt(3), onset=ONSET),
         lambda v, d: v * np.sqrt(3)),
        (FaultSpec("offset", ("D.I",), offset=12.5, onset=ONSET), lambda v, d: v + 12.5),
        (FaultSpec("drift", ("B.P",), drift_per_day=2.0, onset=ONSET),
         lambda v, d: v + 2.0 * d),
    ],
    ids=["reversed-device", "reversed-channel", "scale-ct", "scale-vt", "offset", "drift"],
)
def test_deterministic_kinds(frame, spec, expected):
    points, values = frame
    out, truth = apply_faults(values, points, [spec], np.random.default_rng(0))
    after = values.index >= ONSET
    days = ((values.index - ONSET) / pd.Timedelta(days=1)).to_numpy()[after, None]
    tags = list(spec.tags)
    pd.testing.assert_frame_equal(out.loc[~after], values.loc[~after])
    untouched = values.columns.difference(tags)
    pd.testing.assert_frame_equal(out[untouched], values[untouched])
    np.testing.assert_allclose(out.loc[after, tags], expected(values.loc[after, tags].to_numpy(),
                                                              days))
    assert list(truth["tag"]) == tags and set(truth["kind"]) == {spec.kind}
    assert (truth["onset"] == ONSET).all()


def test_stuck_repeats_the_value_at_the_onset(frame):
    points, values = frame
    out, truth = apply_faults(values, points, [FaultSpec("stuck", ("B.P",), onset=ONSET)],
                              np.random.default_rng(0))
    after = values.index >= ONSET
    assert (out.loc[after, "B.P"] == values.at[ONSET, "B.P"]).all()
    assert _changed(values, out).tolist() == [c == "B.P" for c in values.columns]
    pd.testing.assert_frame_equal(out.loc[~after], values.loc[~after])


def test_noisy_multiplies_sigma(frame):
    points, values = frame
    out, _ = apply_faults(values, points, [FaultSpec("noisy", ("A.Q",), noise_factor=5.0)],
                          np.random.default_rng(0))
    extra = (out["A.Q"] - values["A.Q"]).to_numpy()
    sigma = default_sigma(points)["A.Q"]
    # Extra noise has variance (k² - 1) σ²; 2880 samples: sample sd within ±5 % (chi-square).
    assert np.std(extra) == pytest.approx(np.sqrt(24.0) * sigma, rel=0.05)
    assert _changed(values, out).tolist() == [c == "A.Q" for c in values.columns]


def test_mismapped_swaps_p_and_q(frame):
    points, values = frame
    out, truth = apply_faults(values, points, [FaultSpec("mismapped", ("B.P", "B.Q"),
                                                         onset=ONSET)], np.random.default_rng(0))
    after = values.index >= ONSET
    np.testing.assert_array_equal(out.loc[after, "B.P"], values.loc[after, "B.Q"])
    np.testing.assert_array_equal(out.loc[after, "B.Q"], values.loc[after, "B.P"])
    assert dict(zip(truth["tag"], truth["swapped_with"], strict=True)) == {"B.P": "B.Q",
                                                                           "B.Q": "B.P"}


def test_bad_specs_are_refused(frame):
    points, values = frame
    rng = np.random.default_rng(0)
    with pytest.raises(KeyError, match="not in the point list"):
        apply_faults(values, points, [FaultSpec("offset", ("X",), offset=1.0)], rng)
    with pytest.raises(ValueError, match="P and Q tags of one device"):
        apply_faults(values, points, [FaultSpec("mismapped", ("A.P", "B.Q"))], rng)
    with pytest.raises(ValueError, match="more than one fault"):
        apply_faults(values, points, [FaultSpec("offset", ("A.P",), offset=1.0),
                                      FaultSpec("noisy", ("A.P",), noise_factor=3)], rng)
    with pytest.raises(ValueError, match="unknown fault kind"):
        FaultSpec("flipped", ("A.P",))


def test_wrong_ct_taps_are_ieee_c57_13_taps():
    # IEEE C57.13 multi-ratio 1200:5 taps (REFERENCES.md): 800 is a tap, so 1200/800 = 1.5.
    pairs = wrong_ct_taps("1200:5", (1.4, 1.6))
    assert (1200, 800) in pairs
    for configured, wired in wrong_ct_taps("450:5"):
        assert {configured, wired} <= set(MULTI_RATIO_CT_TAPS[600])
    assert wrong_ct_taps("") == []


def test_random_mix_on_case57_changes_only_faulted_columns(grid57):
    points = make_point_list(grid57, seed=2)
    kinds = list(FAULT_KINDS) + ["reversed", "reversed", "scale", "drift"]
    common = dict(start="2027-05-04 00:00", periods=720, timezone="Europe/Madrid", seed=9,
                  fault_kinds=kinds, options=TelemetryOptions(rtu_outage_hours=1.0))
    faulted = simulate_site(grid57, points, faults=True, **common)
    clean = simulate_site(grid57, points, faults=False, **common)
    truth = faulted.truth
    assert faulted.faulted and not clean.faulted and clean.truth.empty
    assert truth["fault"].nunique() == len(kinds)
    assert sorted(truth.groupby("fault")["kind"].first()) == sorted(kinds)
    assert truth.groupby("device")["fault"].nunique().max() == 1  # one fault per device
    assert not set(truth["tag"]) & faulted.redundancy.weak()
    a, b = faulted.site.snapshots, clean.site.snapshots
    diff = ~((a == b) | (a.isna() & b.isna()))
    assert set(a.columns[diff.any()]) == set(truth["tag"])
    for tag, onset in zip(truth["tag"], truth["onset"], strict=True):
        assert not diff.loc[a.index < onset, tag].any(), tag
    variants = truth.groupby("fault").agg(kind=("kind", "first"), n=("tag", "size"),
                                          q=("tag", lambda t: points.loc[list(t), "quantity"]
                                             .iloc[0]))
    reversed_ = variants[variants["kind"] == "reversed"]
    assert set(reversed_["n"]) == {1, 2}  # whole devices and a single channel
    assert "p_injection" in set(reversed_["q"])  # and an injection
    assert {"v_magnitude", "p_flow"} <= set(variants.loc[variants["kind"] == "scale", "q"])


def test_same_seed_same_data_other_seed_other_data(grid57):
    points = make_point_list(grid57, seed=4)
    assert make_point_list(grid57, seed=4).equals(points)
    common = dict(start="2027-05-04 00:00", periods=240, timezone="Europe/Madrid")
    one = simulate_site(grid57, points, seed=1, **common)
    two = simulate_site(grid57, points, seed=1, **common)
    three = simulate_site(grid57, points, seed=2, **common)
    pd.testing.assert_frame_equal(one.site.snapshots, two.site.snapshots)
    pd.testing.assert_frame_equal(one.truth, two.truth)
    assert not one.site.snapshots.equals(three.site.snapshots)
    assert not one.truth["tag"].equals(three.truth["tag"])


def test_random_faults_respect_exclusions(grid57):
    points = make_point_list(grid57, seed=6)
    clean = simulate_site(grid57, points, start="2027-05-04", periods=120,
                          timezone="Europe/Madrid", seed=3, faults=False)
    values = clean.true_values
    rng = np.random.default_rng(0)
    flows = set(points.index[points["quantity"] == "p_flow"])
    specs = random_faults(points, values, ["offset"] * 5 + ["stuck"], rng=rng, exclude=flows)
    assert len(specs) == 6 and not {t for s in specs for t in s.tags} & flows
    with pytest.raises(ValueError, match="no eligible point"):
        random_faults(points, values, ["mismapped"], rng=rng, exclude=set(points.index))
