"""The ledger and a finding about an RTU's clock (kind ``time_offset``, tag = the RTU): stored
without a schema change, confirmed, dismissed with a reason and reopened when the offset moves
materially, never corrected in software, marked repaired when the clock is set right and then
verified by a review that no longer finds it (the ledger's own life cycle; common practice,
no source)."""

from types import SimpleNamespace

import pandas as pd
import pytest

from calibra.diagnosis.findings import Finding
from calibra.ledger.schema import LedgerError
from calibra.review_period import with_rtu_points
from tests.ledger.conftest import WEEK1, WEEK2, WEEK3

FID = "RTU-MC|time_offset"


def clock(offset: float = 240.0) -> Finding:
    return Finding(tag="RTU-MC", device="", substation="Marlow Cross", finding="time_offset",
                   confidence=0.97, evidence=f"read {offset:g} s late", offset=offset,
                   scope="rtu", element="RTU-MC", unit="s", rtu="RTU-MC")


def _state(ledger) -> str:
    return ledger.findings().loc[FID, "state"]


def test_clock_finding_life_cycle(ledger):
    ledger.record_review([clock()], *WEEK1, {}, {})
    row = ledger.findings().loc[FID]
    assert row["state"] == "new" and row["offset"] == 240.0 and row["finding"] == "time_offset"
    ledger.dismiss(FID, "clock known, fixed next outage", user="ana")
    ledger.record_review([clock(250.0)], *WEEK2, {}, {})
    assert _state(ledger) == "dismissed", "4 % is no material change"
    ledger.record_review([clock(600.0)], *WEEK2, {}, {})
    assert _state(ledger) == "new", "the offset grew by more than 20 %: reopened"
    ledger.confirm(FID, user="ana")
    with pytest.raises(LedgerError, match="set right in the RTU, not in software"):
        ledger.apply_offset("RTU-MC", 600.0, user="ana")
    assert ledger.active_corrections() == []
    ledger.mark_repaired("RTU-MC", WEEK2[1] + pd.Timedelta(hours=1), user="ben")
    assert _state(ledger) == "repaired"
    ledger.record_review([], *WEEK3, {}, {})
    assert _state(ledger) == "verified"


def test_clock_set_right_holds_out_the_rtus_points_before_it():
    points = pd.DataFrame({"rtu": ["RTU-MC", "RTU-MC", "RTU-AV"]},
                          index=["MC-L1-P", "MC-L1-Q", "AV-L3-P"])
    at = pd.Timestamp("2026-03-12T10:00Z")
    out = with_rtu_points(SimpleNamespace(points=points), {"RTU-MC": at})
    assert out == {"RTU-MC": at, "MC-L1-P": at, "MC-L1-Q": at}
