"""``calibra ledger SITE correct RTU``: an RTU clock finding is refused with what to do instead
(set the clock right in the RTU, then mark it repaired at that time), and the ledger is left
unchanged (common practice, no source)."""

from argparse import Namespace

import pandas as pd
import pytest

from calibra.cli.common import UsageError
from calibra.cli.ledger import _correct
from calibra.diagnosis.findings import Finding
from calibra.ledger import Ledger


def test_correct_refuses_an_rtu_clock(tmp_path):
    clock = Finding(tag="RTU-MC", device="", substation="Marlow Cross",
                    finding="time_offset", confidence=0.97, evidence="240 s late",
                    offset=240.0, scope="rtu", element="RTU-MC", unit="s", rtu="RTU-MC")
    with Ledger(tmp_path / "calibra-ledger.sqlite") as ledger:
        ledger.record_review([clock], pd.Timestamp("2026-03-02", tz="UTC"),
                             pd.Timestamp("2026-03-09", tz="UTC"), {}, {})
        rows = ledger.findings().loc[["RTU-MC|time_offset"]]
        args = Namespace(valid_from=None, factor=None, offset=None, user="ana", note="")
        with pytest.raises(UsageError, match="repaired RTU-MC --at TIME"):
            _correct(ledger, rows, args, "UTC")
        assert ledger.active_corrections() == []
        assert ledger.findings().loc["RTU-MC|time_offset", "state"] == "new"
