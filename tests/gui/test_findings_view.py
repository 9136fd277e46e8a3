"""The findings list's view state (Qt-free): merge with ledger states, filters, order,
navigation, and which substation is being commissioned."""

from __future__ import annotations

import numpy as np
import pandas as pd

from calibra.gui.findings_view import (
    FindingFilter,
    FindingsView,
    commissioning_substations,
    neighbour,
)


def _finding(tag, kind, sub, device, conf=0.9, state="new"):
    return {"finding_id": f"{tag}|{kind}", "tag": tag, "device": device, "substation": sub,
            "finding": kind, "confidence": conf, "state": state, "factor": np.nan,
            "offset": np.nan, "drift_per_day": np.nan, "evidence": f"{tag} evidence"}


REVIEW = pd.DataFrame([
    _finding("AAA.1.MW", "reversed", "AAA", "AAA.1", 1.0),
    _finding("AAA.1.MVAR", "reversed", "AAA", "AAA.1", 0.97),
    _finding("NEW.2.KV", "scale", "NEW", "NEW.2", 0.6),
    _finding("BBB.3.MW", "offset", "BBB", "BBB.3", 0.8),
])
LEDGER = pd.DataFrame([
    {**_finding("AAA.1.MW", "reversed", "AAA", "AAA.1"), "state": "confirmed"},
    {**_finding("OLD.9.MW", "drift", "BBB", "OLD.9"), "state": "corrected"},
]).set_index("finding_id")


def _view() -> FindingsView:
    view = FindingsView(focus=["NEW"])
    view.set_review(REVIEW)
    view.set_ledger(LEDGER)
    return view


def test_review_rows_take_the_ledger_state():
    table = _view().table()
    state = dict(zip(table["finding_id"], table["state"], strict=True))
    assert state["AAA.1.MW|reversed"] == "confirmed"
    assert state["NEW.2.KV|scale"] == "new"
    earlier = table[~table["in_review"]]
    assert list(earlier["finding_id"]) == ["OLD.9.MW|drift"]


def test_before_any_review_the_ledger_is_listed():
    view = FindingsView()
    view.set_ledger(LEDGER)
    assert set(view.visible()["finding_id"]) == set(LEDGER.index)


def test_order_puts_the_new_substation_first_then_groups():
    view = _view()
    order = list(view.visible()["tag"])
    assert order == ["NEW.2.KV", "AAA.1.MVAR", "AAA.1.MW", "BBB.3.MW"]
    groups = view.groups()
    assert [g[0] for g in groups] == ["NEW", "AAA", "BBB"]
    assert [d for d, _ in groups[1][1]] == ["AAA.1"]


def test_a_finding_without_device_is_grouped_under_its_element():
    """A network-model finding has no device: it is listed under its branch, not under an
    empty group row (common practice, no source)."""
    model = {**_finding("L7:x", "model", "BBB", ""), "element": "L7"}
    view = FindingsView()
    view.set_review(pd.concat([REVIEW, pd.DataFrame([model])], ignore_index=True))
    groups = dict(dict(view.groups())["BBB"])
    assert sorted(groups) == ["BBB.3", "L7"]
    assert list(groups["L7"]["tag"]) == ["L7:x"]


def test_filters():
    view = _view()
    view.filter = FindingFilter(kind="reversed")
    assert set(view.visible()["tag"]) == {"AAA.1.MW", "AAA.1.MVAR"}
    view.filter = FindingFilter(min_confidence=0.95)
    assert set(view.visible()["tag"]) == {"AAA.1.MW", "AAA.1.MVAR"}
    view.filter = FindingFilter(state="confirmed")
    assert list(view.visible()["tag"]) == ["AAA.1.MW"]
    view.filter = FindingFilter(search="mvar")
    assert list(view.visible()["tag"]) == ["AAA.1.MVAR"]
    view.filter = FindingFilter(substations=frozenset({"BBB"}))
    assert list(view.visible()["tag"]) == ["BBB.3.MW"]
    view.filter = FindingFilter(substations=frozenset({"BBB"}), include_earlier=True)
    assert list(view.visible()["tag"]) == ["BBB.3.MW", "OLD.9.MW"]


def test_navigation_wraps():
    ids = ["a", "b", "c"]
    assert neighbour(ids, "a", 1) == "b"
    assert neighbour(ids, "c", 1) == "a"
    assert neighbour(ids, "a", -1) == "c"
    assert neighbour(ids, None, 1) == "a" and neighbour(ids, None, -1) == "c"
    assert neighbour([], "a", 1) is None
    view = _view()
    assert view.neighbour("NEW.2.KV|scale", 1) == "AAA.1.MVAR|reversed"


def test_flagged_tags_are_open_findings_of_the_review():
    assert _view().flagged_tags() == {"AAA.1.MW", "AAA.1.MVAR", "NEW.2.KV", "BBB.3.MW"}


def test_commissioning_from_notes_or_late_start():
    points = pd.DataFrame({"substation": ["A", "A", "B", "C"],
                           "note": ["", "", "", "under commissioning"]},
                          index=["a1", "a2", "b1", "c1"])
    assert commissioning_substations(points) == ["C"]
    points["note"] = ""
    index = pd.date_range("2027-03-01", periods=48, freq="h", tz="UTC")
    snaps = pd.DataFrame(1.0, index=index, columns=points.index)
    assert commissioning_substations(points, snaps) == []  # all report from the start
    snaps.loc[index[:30], "c1"] = np.nan  # C starts 30 h late: the newest substation
    assert commissioning_substations(points, snaps) == ["C"]
    snaps.loc[index[:28], "b1"] = np.nan  # B nearly as late: no clear newest one
    assert commissioning_substations(points, snaps) == []
