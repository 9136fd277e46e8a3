"""The one rule for corrections chosen from findings (command line and desktop).

The gains and biases follow the measurement model of each finding: measured = −true
(reversed) → gain −1; measured = k × true (scale) → gain 1/k; measured = true + c (offset) →
bias −c (common practice, no source: the algebra of a linear transducer error).
"""

from __future__ import annotations

import math

import pandas as pd
import pytest

from calibra.ledger import LedgerError
from calibra.ledger.software_fixes import apply_fixes, plan_fixes
from tests.ledger.conftest import WEEK1, finding


def table(*rows: tuple[str, str, float, float]) -> pd.DataFrame:
    return pd.DataFrame(rows, columns=["tag", "finding", "factor", "offset"])


def test_one_fix_a_point_by_its_first_correctable_finding():
    plan = plan_fixes(table(("B.Q", "offset", math.nan, 2.5), ("A.P", "stuck", math.nan, math.nan),
                            ("A.P", "scale", 1.5, math.nan), ("A.P", "offset", math.nan, 3.0),
                            ("C.I", "noisy", math.nan, math.nan)))
    assert [(f.tag, f.kind, f.value) for f in plan.fixes] == [("A.P", "scale", 1.5),
                                                              ("B.Q", "offset", 2.5)]
    assert len(plan.left) == 1 and plan.left[0].startswith("C.I: noisy cannot be corrected")


def test_given_values_replace_the_fitted_ones():
    plan = plan_fixes(table(("A.P", "reversed", -1.0, math.nan), ("B.P", "offset", 1.0, 4.0)),
                      factor=-0.98, offset=3.5)
    assert [(f.kind, f.value) for f in plan.fixes] == [("reversed", -0.98), ("offset", 3.5)]
    assert plan.fixes[0].describe() == "A.P: corrected in software (measured = -0.98 × true)"
    plain = plan_fixes(table(("A.P", "reversed", -1.0, math.nan))).fixes[0]
    assert plain.value is None and plain.describe().endswith("(sign reversed)")


@pytest.mark.parametrize("rows, message", [
    ([("A.P", "stuck", math.nan, math.nan)], "A.P: stuck cannot be corrected in software"),
    ([("A.P", "scale", math.nan, math.nan)], "A.P: the scale finding has no fitted factor"),
    ([("A.P", "drift", math.nan, math.nan), ("B.P", "noisy", math.nan, math.nan)],
     "no finding of these points can be corrected in software"),
])
def test_what_cannot_be_corrected_stops_the_action(rows, message):
    with pytest.raises(LedgerError, match=message):
        plan_fixes(table(*rows))


def test_a_point_without_its_value_stops_the_whole_device(ledger):
    rows = table(("A.P", "reversed", -1.0, math.nan), ("A.Q", "scale", math.nan, math.nan))
    with pytest.raises(LedgerError, match="A.Q"):
        apply_fixes(ledger, plan_fixes(rows))
    assert ledger.active_corrections() == []  # nothing written, not even A.P's fix


def test_applied_fixes_are_the_corrections_the_findings_imply(ledger):
    ledger.record_review([finding("A.P"), finding("B.P", "scale", factor=2.0),
                          finding("C.P", "offset", offset=1.25)], *WEEK1, {}, {})
    found = ledger.findings().reset_index()
    plan = plan_fixes(found[["tag", "finding", "factor", "offset"]])
    ids = apply_fixes(ledger, plan, user="ana", note="bench test")
    assert len(ids) == 3
    got = {c.tag: (c.gain, c.bias) for c in ledger.active_corrections()}
    assert got == {"A.P": (-1.0, 0.0), "B.P": (0.5, 0.0), "C.P": (1.0, -1.25)}
    assert set(ledger.findings()["state"]) == {"corrected"}
