"""One time policy: every time shown to a person is in the site's zone and says which zone;
every time written for machines is ISO 8601 UTC with ``Z``; every time a person types is read by
:func:`read_local`."""

from __future__ import annotations

from datetime import datetime

import pandas as pd

try:  # pandas 2 raises pytz's errors for a local time that is not one moment, pandas 3 ValueError
    from pytz.exceptions import InvalidTimeError as _PytzInvalidTime
except ImportError:  # pragma: no cover - pandas 3 without pytz
    _PytzInvalidTime = ValueError
#: What localizing an ambiguous or non-existent local time raises.
LOCAL_TIME_ERRORS = (ValueError, _PytzInvalidTime)

TimeLike = str | datetime | pd.Timestamp


def _utc(t: TimeLike) -> pd.Timestamp | None:
    if t is None or (not isinstance(t, str) and pd.isna(t)):
        return None
    t = pd.Timestamp(t)
    if pd.isna(t):
        return None
    return t.tz_localize("UTC") if t.tzinfo is None else t.tz_convert("UTC")


def for_people(t: TimeLike | None, timezone: str, seconds: bool = False,
               weekday: bool = False) -> str:
    """``2027-03-05 12:00 CET`` (``Fri 2027-03-05 12:00 CET`` with ``weekday``; the zone's
    abbreviation at that time, or its offset such as ``UTC+05:30`` where the zone has none);
    naive times are taken as UTC; '' for none."""
    u = _utc(t)
    if u is None:
        return ""
    local = u.tz_convert(timezone)
    name = local.tzname() or ""
    if not name or name[0] in "+-" or name.isdigit():
        offset = local.strftime("%z")
        name = f"UTC{offset[:3]}:{offset[3:]}" if offset else "UTC"
    day = f"{local:%a} " if weekday else ""
    return f"{day}{local:%Y-%m-%d %H:%M{':%S' if seconds else ''}} {name}"


def for_machines(t: TimeLike | None) -> str:
    """``2027-03-05T11:00:00Z``; '' for none (naive times are taken as UTC)."""
    u = _utc(t)
    if u is None:
        return ""
    text = u.isoformat()
    return text.replace("+00:00", "Z")


def read_local(text: TimeLike, timezone: str, what: str = "") -> pd.Timestamp:
    """A time typed by a person (``--from``, ``--to``, ``ledger repaired --at``, a period given
    to the loader): in the site's zone unless it names its own; returned in UTC. The one parser
    of typed times. Raises ValueError, starting with ``what`` (the option or parameter) when
    given, when the text is not a time or not one moment in the zone."""
    name = f"{what}: " if what else ""
    not_a_time = (f"{name}not a time: {text!r} (write it as 2027-03-01 06:00, in {timezone} "
                  "unless it gives a UTC offset)")
    try:
        t = pd.Timestamp(text)
    except (ValueError, TypeError) as exc:
        raise ValueError(not_a_time) from exc
    if t is pd.NaT:
        raise ValueError(not_a_time)
    if t.tzinfo is None:
        try:
            t = t.tz_localize(timezone, ambiguous="raise", nonexistent="raise")
        except LOCAL_TIME_ERRORS as exc:
            raise ValueError(f"{name}{text!r} is not a single moment in {timezone} (daylight "
                             "saving time skips or repeats it); give a UTC offset") from exc
    return t.tz_convert("UTC")
