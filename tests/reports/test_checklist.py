"""Checklist items per kind of finding: the trade's checks, made specific by the point list.

Facts used: a CT's polarity marks P1/P2 (primary) and S1/S2 (secondary) (IEC 61869-2 [M]);
a wrong tap of a multi-ratio CT gives a scale error equal to the ratio of two taps
(IEEE C57.13 tap table, /work/shared REFERENCES); line-to-line = √3 × line-to-neutral (physics).
"""

import math

import pandas as pd
import pytest

from calibra.diagnosis.findings import FINDING_KINDS
from calibra.reports import checklist_items


def _row(kind, **values):
    return {"tag": "MC-L1-P", "finding": kind, "device": "MC-IED-1", "rtu": "RTU-MC",
            "channel": "4", "quantity": "p_flow", "unit": "MW", **values}


@pytest.mark.parametrize("kind", FINDING_KINDS)
def test_every_kind_has_checks(kind):
    items = checklist_items(pd.Series(_row(kind)))
    assert len(items) >= 2 and all(item.strip().endswith((".", ")")) for item in items)


def test_unknown_kind_is_refused():
    with pytest.raises(ValueError, match="MC-L1-P: unknown finding kind 'wobbly'"):
        checklist_items(_row("wobbly"))


def test_reversed_device_points_to_ct_polarity_and_wiring():
    text = " ".join(checklist_items(_row("reversed", scope="device")))
    for words in ("P1/P2", "S1/S2", "secondary wiring", "sign convention", "shorted"):
        assert words.lower() in text.lower()


def test_reversed_single_point_points_to_its_configuration():
    (first, second) = checklist_items(_row("reversed", scope="point"))
    assert "channel 4 of RTU RTU-MC" in first and "sign" in first
    assert "MC-IED-1" in second


def test_scale_names_the_ratios_to_compare():
    items = checklist_items(_row("scale", factor=1.5, ct_ratio="1200:5", vt_ratio="132000:110"))
    text = " ".join(items)
    assert "1.5 ×" in text
    assert "CT ratio 1200:5" in text and "1200/800 = 1.5" in text   # IEEE C57.13 taps
    assert "VT ratio 132000:110" in text and "line-to-neutral" in text
    assert "engineering units (MW)" in text
    assert "√3" not in text, "1.5 is not a √3 mix-up"


@pytest.mark.parametrize("factor", [math.sqrt(3), 1 / math.sqrt(3), -1.70])
def test_scale_near_root_three_blames_the_voltage_connection(factor):
    items = checklist_items(_row("scale", quantity="v_magnitude", unit="kV", factor=factor))
    assert any("√3" in item and "line-to-line" in item for item in items)
    assert not any(item.startswith("CT:") for item in items), "a voltage point has no CT"


def test_current_scale_has_no_vt_check():
    items = checklist_items(_row("scale", quantity="i_magnitude", unit="A", factor=0.5))
    assert any(item.startswith("CT:") for item in items)
    assert not any(item.startswith("VT:") for item in items)


def test_offset_drift_stuck_noisy_wording():
    assert "+4.2 MW" in " ".join(checklist_items(_row("offset", offset=4.2)))
    assert "zero" in " ".join(checklist_items(_row("offset")))
    drift = " ".join(checklist_items(_row("drift", drift_per_day=0.35, accuracy_pct=0.5,
                                          onset="2026-03-04T06:00:00+00:00")))
    assert "0.35 MW a day from 2026-03-04" in drift and "class 0.5 %" in drift
    assert "reference meter" in drift
    stuck = " ".join(checklist_items(_row("stuck")))
    assert "communication" in stuck and "frozen" in stuck
    noisy = " ".join(checklist_items(_row("noisy")))
    assert "single ground point" in noisy and "screens" in noisy.lower()


def test_mismapped_recognises_crossed_p_and_q():
    crossed = checklist_items(_row("mismapped", matched="reactive-power flow at the Marlow "
                                   "Cross end of L1", element="L1", end="from",
                                   substation="Marlow Cross"))
    assert "(listed as the active-power flow at the Marlow Cross end of L1)" in crossed[0]
    assert "which channel carries P and which carries Q" in crossed[1]
    other = checklist_items(_row("mismapped", matched="active-power flow at the Kestrel Bank "
                                 "end of L2", element="L1", end="from"))
    assert "match active-power flow at the Kestrel Bank end of L2 instead" in other[1]
    for item in crossed + other:
        for internal in ("p_flow", "q_flow", "from)", "to)"):
            assert internal not in item, item


def test_unverifiable_carries_the_suggested_meter():
    items = checklist_items(_row("unverifiable", action="add a meter of the reactive-power "
                                 "flow at the Kestrel Bank end of L4; until then check the "
                                 "point against a portable reference meter"))
    assert items[0] == ("Metering: add a meter of the reactive-power flow at the Kestrel Bank "
                        "end of L4, so that other meters check this point.")
    assert "portable reference meter" in items[1]
    assert not any("suggested" in item.lower() for item in items)
    plain = checklist_items(_row("unverifiable", action="check the point against a portable "
                                 "reference meter"))
    assert "portable reference meter" in plain[0] and "add" not in plain[0]
