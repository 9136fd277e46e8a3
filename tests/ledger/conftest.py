import itertools

import pandas as pd
import pytest

from calibra.diagnosis.findings import Finding
from calibra.ledger import Ledger

WEEK1 = (pd.Timestamp("2026-03-02", tz="UTC"), pd.Timestamp("2026-03-09", tz="UTC"))
WEEK2 = (pd.Timestamp("2026-03-09", tz="UTC"), pd.Timestamp("2026-03-16", tz="UTC"))
WEEK3 = (pd.Timestamp("2026-03-16", tz="UTC"), pd.Timestamp("2026-03-23", tz="UTC"))


def finding(tag: str, kind: str = "reversed", **values) -> Finding:
    """A finding of the invented site (substation Marlow Cross, device per tag)."""
    defaults = {"confidence": 0.95, "evidence": f"{kind} over 2016 snapshots"}
    if kind == "reversed":
        defaults["factor"] = -1.0
    return Finding(tag=tag, device=f"{tag}-IED", substation="Marlow Cross", finding=kind,
                   **{**defaults, **values})


class Clock:
    """A test clock: one second later at every reading."""

    def __init__(self, start: str = "2026-03-10T08:00:00Z"):
        self._ticks = itertools.count()
        self._start = pd.Timestamp(start)

    def __call__(self) -> pd.Timestamp:
        return self._start + pd.Timedelta(seconds=next(self._ticks))


@pytest.fixture
def ledger(tmp_path):
    with Ledger(tmp_path / "calibra-ledger.sqlite", clock=Clock()) as led:
        yield led
