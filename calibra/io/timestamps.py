"""Turning the ``timestamp`` column of a snapshot file into UTC times.

Times with a UTC offset (``2024-03-04T10:00:00+01:00``, ``…Z``) are converted to UTC; times
without one are local times of the site's timezone. Local times that do not exist (the hour
skipped when daylight saving time starts) are skipped; local times that occur twice (the hour
repeated when it ends) are placed by their order in the file when that is possible.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from calibra.io.problems import ProblemLog
from calibra.model.times import LOCAL_TIME_ERRORS

# Not anchored at the end: a time followed by an offset and then junk (``…-03:00,56``) is an
# aware time that fails to parse, not a local one (pandas would carry its offset on to the
# local times after it).
_OFFSET = r"\d:\d\d(?::\d\d(?:[.,]\d+)?)?\s*(?:Z|z|[+-]\d\d(?::?\d\d)?)"
#: Years that a nanosecond time (what the snapshot index holds) can represent in full.
FIRST_YEAR, LAST_YEAR = 1678, 2261
OUT_OF_RANGE = (f"time outside the years {FIRST_YEAR}-{LAST_YEAR} that calibra handles; "
                "row skipped")


def _in_range_years(years: np.ndarray) -> np.ndarray:
    return np.isnan(years) | ((years >= FIRST_YEAR) & (years <= LAST_YEAR))


def _in_range(times: pd.DatetimeIndex) -> np.ndarray:
    """True where a time is missing or within the representable years (any unit)."""
    return _in_range_years(np.asarray(times.year, dtype=float))


def _nanoseconds(
    times: pd.DatetimeIndex, rows: np.ndarray, file: str, log: ProblemLog
) -> pd.DatetimeIndex:
    """``times`` in nanoseconds; times out of that range become NaT, logged per row."""
    ok = _in_range(times)
    if not ok.all():
        log.per_row(file, rows[~ok], "timestamp", OUT_OF_RANGE)
        times = times.where(ok)
    return times.as_unit("ns")


def parse_times(
    values: pd.Series, rows: np.ndarray, timezone: str, file: str, log: ProblemLog
) -> pd.DatetimeIndex:
    """UTC times (NaT where a row must be skipped); every skipped row is logged.

    ``values`` are the cells of the timestamp column (text, or datetimes from Parquet);
    ``rows`` the spreadsheet row number of each. Empty cells give NaT without a message.
    """
    if isinstance(values.dtype, pd.DatetimeTZDtype):
        return _nanoseconds(pd.DatetimeIndex(values), rows, file, log).tz_convert("UTC")
    if pd.api.types.is_datetime64_dtype(values.dtype):
        local = _nanoseconds(pd.DatetimeIndex(values), rows, file, log)
        return _localize(local, rows, timezone, file, log)
    text = values.astype(str).str.strip().where(values.notna(), "").reset_index(drop=True)
    empty = text.eq("").to_numpy()
    # ISO 8601 starts with the year; pandas would also read the words 'now' and 'today'
    unparsed = ~empty & ~text.str.match(r"[+-]?\d").to_numpy(dtype=bool)
    # Years a nanosecond index cannot hold are caught from the text: pandas 2 turns them into
    # NaT while parsing, pandas 3 parses them in another unit.
    year = pd.to_numeric(text.str.extract(r"^([+-]?\d+)(?:-|$)", expand=False), errors="coerce")
    far = (~empty & ~unparsed & year.notna().to_numpy()
           & ~_in_range_years(year.to_numpy(float)))
    if far.any():
        log.per_row(file, rows[far], "timestamp", OUT_OF_RANGE)
        unparsed_or_far = unparsed | far
    else:
        unparsed_or_far = unparsed
    aware = text.str.contains(_OFFSET, regex=True).to_numpy() & ~empty & ~unparsed_or_far
    naive = ~aware & ~empty & ~unparsed_or_far
    result = np.full(len(text), np.datetime64("NaT", "ns"))
    if aware.any():
        parsed = pd.DatetimeIndex(
            pd.to_datetime(text[aware], format="ISO8601", utc=True, errors="coerce")
        )
        unparsed[aware] = np.asarray(parsed.isna())
        parsed = _nanoseconds(parsed, rows[aware], file, log)
        result[aware] = parsed.tz_localize(None).to_numpy()
    if naive.any():
        parsed = _parse_local(text[naive])
        unparsed[naive] = np.asarray(parsed.isna())
        parsed = _nanoseconds(parsed, rows[naive], file, log)
        result[naive] = _localize(parsed, rows[naive], timezone, file, log).tz_localize(None)
        if aware.any():
            log.warning(
                file, int(rows[np.flatnonzero(naive)[0]]), "timestamp",
                f"the file mixes times with and without a UTC offset; {int(naive.sum())} times "
                f"without one are read as {timezone} local time",
                count=int(naive.sum()),
            )
    if unparsed.any():
        log.per_row(
            file, rows[unparsed], "timestamp",
            "not an ISO 8601 time such as 2024-03-04 13:45 or 2024-03-04T13:45:00+01:00; "
            "row skipped",
        )
    return pd.DatetimeIndex(result).tz_localize("UTC")


def _parse_local(text: pd.Series) -> pd.DatetimeIndex:
    """Times without an offset; one by one where pandas' batch parse turns any aware (unparsed)."""
    try:
        parsed = pd.DatetimeIndex(pd.to_datetime(text, format="ISO8601", errors="coerce"))
        if parsed.tz is None:
            return parsed
    except (ValueError, TypeError):
        pass
    one = [pd.to_datetime(value, format="ISO8601", errors="coerce") for value in text]
    return pd.DatetimeIndex([t if t is not pd.NaT and t.tzinfo is None else pd.NaT for t in one])


def _localize(
    local: pd.DatetimeIndex,
    rows: np.ndarray,
    timezone: str,
    file: str,
    log: ProblemLog,
) -> pd.DatetimeIndex:
    """Site-time → UTC, logging times skipped or made ambiguous by daylight saving time."""
    strict = local.tz_localize(timezone, ambiguous="NaT", nonexistent="NaT")
    shifted = local.tz_localize(timezone, ambiguous="NaT", nonexistent="shift_forward")
    valid = np.asarray(local.notna())
    missing_hour = valid & np.asarray(strict.isna()) & np.asarray(shifted.notna())
    repeated = valid & np.asarray(shifted.isna())
    placed = strict
    if repeated.any():
        try:
            placed = local.tz_localize(timezone, ambiguous="infer", nonexistent="NaT")
        except LOCAL_TIME_ERRORS:
            placed = strict
        if placed[repeated].notna().all():
            log.warning(
                file, int(rows[np.flatnonzero(repeated)[0]]), "timestamp",
                f"{int(repeated.sum())} local times fall in the hour repeated when daylight "
                "saving time ends; placed by their order (first before, then after the change)",
                count=int(repeated.sum()),
            )
        else:
            log.per_row(
                file, rows[repeated], "timestamp",
                "local time occurs twice when daylight saving time ends and its order does not "
                "tell which is meant (give a UTC offset); row skipped",
            )
    if missing_hour.any():
        log.per_row(
            file, rows[missing_hour], "timestamp",
            f"local time does not exist in {timezone} (skipped when daylight saving time "
            "starts); row skipped",
        )
    return placed.tz_convert("UTC")
