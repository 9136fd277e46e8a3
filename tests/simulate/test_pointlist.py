"""The generated point list: format, instrument ratios, full scales, sparse areas."""

import numpy as np
import pytest

from calibra.model.points import POINT_COLUMNS, QUANTITIES, TAP_QUANTITY, parse_ratio
from calibra.simulate.metering import (
    MULTI_RATIO_CT_TAPS,
    SINGLE_RATIO_CT_PRIMARIES,
    MeteringOptions,
    choose_ct,
    make_point_list,
)
from calibra.simulate.redundancy import redundancy_report


def test_point_list_format_and_ratios(grid118):
    pts = make_point_list(grid118, seed=3)
    assert list(pts.columns) == POINT_COLUMNS and pts.index.is_unique
    # Tap-position points come with moving tap changers (simulate.tap_motion), not here.
    for q, spec in QUANTITIES.items():
        if q == TAP_QUANTITY:
            continue
        rows = pts[pts["quantity"] == q]
        assert len(rows), q
        assert set(rows["unit"]) <= set(spec["units"])
        assert (rows["end"].isin(["from", "to"]) if spec["end"] else rows["end"].eq("")).all()
    analog = pts[pts["quantity"] != "branch_status"]
    assert set(analog["accuracy_pct"]) <= {0.2, 0.5, 1.0}
    # IEEE C57.13 standard primaries (REFERENCES.md: multi-ratio taps [R], single ratios [M]).
    standard = {t for taps in MULTI_RATIO_CT_TAPS.values() for t in taps}
    standard |= set(SINGLE_RATIO_CT_PRIMARIES)
    ct = analog.loc[analog["ct_ratio"] != "", "ct_ratio"]
    assert {round(parse_ratio(r) * 5) for r in ct} <= standard
    # P/Q full scale of a CT-fed transducer: √3 × kV × primary A / 1000 (physics), 3 digits.
    kv = grid118.network.buses["kv"]
    flows = analog[analog["quantity"] == "p_flow"]
    branch = grid118.network.branches
    bus = np.where(flows["end"] == "from", branch.loc[flows["element"], "from_bus"],
                   branch.loc[flows["element"], "to_bus"])
    expect = np.sqrt(3) * kv[bus].to_numpy() * flows["ct_ratio"].map(parse_ratio) * 5 / 1000
    np.testing.assert_allclose(flows["full_scale"], expect, rtol=5e-3)
    # P and Q at one branch end share one device; each device lives in one substation.
    assert (analog.groupby("device")["substation"].nunique() == 1).all()
    pq = analog[analog["quantity"].isin(["p_flow", "q_flow"])]
    assert (pq.groupby(["element", "end"])["device"].nunique() == 1).all()
    # Channels count up from 1 on each RTU.
    for _, g in pts.groupby("rtu"):
        assert list(g["channel"]) == list(range(1, len(g) + 1))


def test_unmetered_and_commissioning_substations(grid57):
    opts = MeteringOptions(unmetered_substations=("33",), n_unmetered=2,
                           commissioning_substations=("12",), fully_metered_substations=("12",))
    pts = make_point_list(grid57, options=opts, seed=1)
    subs = set(pts["substation"])
    assert "33" not in subs and len(set(grid57.network.buses["substation"]) - subs) == 3
    new = pts["substation"] == "12"
    assert new.to_numpy()[-new.sum():].all() and not new.to_numpy()[:-new.sum()].any()
    assert (pts.loc[new, "note"] == "commissioning").all() and (pts.loc[~new, "note"] == "").all()
    # Fully metered: every branch end at bus 12 has P, Q and I.
    br = grid57.network.branches
    ends = len(br[br["from_bus"] == "12"]) + len(br[br["to_bus"] == "12"])
    assert (pts.loc[new, "quantity"] == "i_magnitude").sum() == ends
    # Every metered substation has a voltage point.
    assert set(pts.loc[pts["quantity"] == "v_magnitude", "substation"]) == subs


def test_choose_ct_takes_smallest_fitting_tap():
    # IEEE C57.13 taps (REFERENCES.md): 600:5 tap list includes 450; 1200:5 includes 800.
    assert choose_ct(210, 2.0) == (450.0, "450:5")
    assert choose_ct(200, 2.0) == (400.0, "400:5")
    assert choose_ct(700, 1.0) == (800.0, "800:5")
    assert choose_ct(3500, 1.0) == (4000.0, "4000:5")
    prim, ratio = choose_ct(50_000, 1.0)
    assert ratio == "" and prim >= 50_000


def _radial_33(grid57, keep_injection_33: bool):
    """Dense metering, except around bus 33 (radial from 32): only the flow 32→33 sees it."""
    pts = make_point_list(grid57, options=MeteringOptions(branch_end_coverage=1.0,
                                                          voltage_coverage=0.0), seed=1)
    drop = ((pts["quantity"] == "v_magnitude") & (pts["element"] == "33")) | (
        (pts["element"] == "32-33-1") & ((pts["end"] == "to") | (pts["quantity"] == "i_magnitude"))
    ) | ((pts["element"] == "32") & pts["quantity"].str.endswith("injection"))
    if not keep_injection_33:
        drop |= (pts["element"] == "33") & pts["quantity"].str.endswith("injection")
    return pts[~drop]


def test_critical_points_are_those_without_redundancy(grid57):
    # Definition (Abur & Gómez-Expósito 2004, ch. 5): removing a critical measurement makes the
    # network unobservable; checked by the rank of the reduced Jacobian without that point.
    pts = _radial_33(grid57, keep_injection_33=False)
    base = grid57.solve()
    rep = redundancy_report(grid57.network, pts, base.vm, base.va_rad)
    flows = set(pts.index[pts["element"] == "32-33-1"]) - set(
        pts.index[pts["quantity"] == "branch_status"])
    assert rep.observable and set(rep.critical) == flows
    for tag in flows:
        assert not redundancy_report(grid57.network, pts.drop(tag), base.vm,
                                     base.va_rad).observable
    redundant = rep.residual_sensitivity[rep.residual_sensitivity > 0.5].index[:3]
    for tag in redundant:
        assert redundancy_report(grid57.network, pts.drop(tag), base.vm, base.va_rad).observable


def test_critical_pair_of_a_radial_bus(grid57):
    # With the injection at 33 kept, the flow into 33 and that injection carry the same
    # information, so their residuals are perfectly correlated (a critical pair; Abur &
    # Gómez-Expósito 2004, ch. 5): neither is critical, both are unidentifiable.
    pts = _radial_33(grid57, keep_injection_33=True)
    base = grid57.solve()
    rep = redundancy_report(grid57.network, pts, base.vm, base.va_rad)
    flow = pts.index[(pts["element"] == "32-33-1") & (pts["quantity"] == "p_flow")][0]
    inj = pts.index[(pts["element"] == "33") & (pts["quantity"] == "p_injection")][0]
    assert not rep.critical
    assert tuple(sorted((flow, inj))) in {tuple(sorted(p)) for p in rep.critical_pairs}
    assert {flow, inj} <= rep.unidentifiable


def test_bad_base_case_is_refused(grid57):
    bad = type(grid57)(grid57.network, grid57.load_mw * 50, grid57.load_mvar * 50,
                       grid57.gen_mw, grid57.gen_mvar, grid57.v_set, grid57.pv)
    with pytest.raises(ValueError, match="does not solve"):
        make_point_list(bad, seed=0)
