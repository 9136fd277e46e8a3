"""Quantities named as an engineer says them (issue 14: field text used internal names)."""

from __future__ import annotations

import pandas as pd

from calibra.model.points import QUANTITIES, end_place, quantity_of_words, quantity_words

BUSES = pd.DataFrame({"substation": ["NRC", "NRC", "PLB"]},
                     index=pd.Index(["NRC_110", "NRC_33", "PLB_110"], name="bus"))
BRANCHES = pd.DataFrame({"from_bus": ["NRC_110", "NRC_110"], "to_bus": ["PLB_110", "NRC_33"]},
                        index=pd.Index(["NRC-PLB", "NRC-T1"], name="branch"))


def test_branch_ends_are_named_by_substation_or_by_bus_inside_one():
    assert end_place(BUSES, BRANCHES, "NRC-PLB", "from") == "NRC"
    assert end_place(BUSES, BRANCHES, "NRC-PLB", "to") == "PLB"
    assert end_place(BUSES, BRANCHES, "NRC-T1", "to") == "NRC_33"
    assert end_place(BUSES, BRANCHES, "nowhere", "to") == ""


def test_words_for_every_quantity():
    place = end_place(BUSES, BRANCHES, "NRC-PLB", "from")
    assert (quantity_words("p_flow", "NRC-PLB", place)
            == "active-power flow at the NRC end of NRC-PLB")
    assert quantity_words("q_injection", "DRM_33") == "reactive-power injection at bus DRM_33"
    assert quantity_words("v_magnitude", "DRM_33") == "voltage magnitude at bus DRM_33"
    assert (quantity_words(("p_flow", "q_flow"), "NRC-PLB", "PLB")
            == "active- and reactive-power flow at the PLB end of NRC-PLB")
    for q in QUANTITIES:
        text = quantity_words(q, "X1", "NRC")
        assert "_" not in text and "from" not in text and "(to" not in text
        assert quantity_of_words(text) == q
