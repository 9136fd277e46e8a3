"""Timestamps in the ledger: always UTC, stored as fixed-width ISO 8601 text."""

from __future__ import annotations

from datetime import datetime

import pandas as pd

_FORMAT = "%Y-%m-%dT%H:%M:%S.%f+00:00"


def to_utc(value: str | datetime | pd.Timestamp, what: str) -> pd.Timestamp:
    """``value`` as a UTC timestamp; a time without a timezone is refused (``what`` names it)."""
    try:
        ts = pd.Timestamp(value)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{what}: {value!r} is not a date and time") from exc
    if ts is pd.NaT:
        raise ValueError(f"{what}: a date and time is required")
    if ts.tzinfo is None:
        raise ValueError(f"{what}: {value!r} has no timezone; give it with an offset or in UTC")
    return ts.tz_convert("UTC")


def to_text(value: str | datetime | pd.Timestamp | None, what: str) -> str | None:
    """Stored form of a timestamp (None stays None). Fixed width, so text order is time order."""
    if value is None or (not isinstance(value, str) and pd.isna(value)):
        return None
    return to_utc(value, what).strftime(_FORMAT)


def from_text(text: str | None) -> pd.Timestamp | None:
    """A stored timestamp back as a tz-aware UTC ``pd.Timestamp`` (None stays None)."""
    if text is None:
        return None
    return pd.Timestamp(text).tz_convert("UTC")


def now_utc() -> pd.Timestamp:
    return pd.Timestamp.now(tz="UTC")
