"""Putting the samples of long historian exports on the snapshot grid, and reporting them.

The rule (documented in ``sample_site/README.md``):

- The grid is every multiple of the interval counted from 1970-01-01 00:00 UTC: ``interval``
  from ``[snapshots]`` in ``site.toml``, else inferred from the data (the median spacing of
  each point's consecutive samples, rounded to a whole second and to a common interval
  within 10 %). A grid time is a snapshot when some point has a sample younger than the
  maximum age there, up to the first grid time at or after the latest sample.
- A point's value at a grid time g is its latest sample at or before g when that sample is
  younger than ``max_age`` (0 ≤ g − t < max_age; default one interval) and usable (good,
  questionable, substituted, manual or override). A bad sample, an empty or unusable value
  ends the point's value: it stays missing until its next usable sample. Values are never
  interpolated, and never carried across a gap longer than ``max_age``.
- Two samples of one point at the same time: the later file (by name) or the later row
  wins, with a counted warning per point.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from calibra.io.long_table import (
    BAD_QUALITY,
    BAD_STATUS,
    EMPTY,
    NOT_A_NUMBER,
    UNKNOWN_CODE,
    LongLayout,
    Reading,
    chunks,
    header_of,
    long_layout,
    read_samples,
    sample_times,
    seq_place,
)
from calibra.io.problems import ProblemLog
from calibra.io.quality import Validity
from calibra.io.snapshot_period import FilePlan, Period
from calibra.io.snapshot_settings import SnapshotSettings
from calibra.io.snapshot_size import FileRows, refuse_if_too_large
from calibra.io.wide_quality import SOURCE_WORDS, source_message

COMMON_INTERVALS = [pd.Timedelta(s) for s in (
    "1s", "2s", "5s", "10s", "15s", "20s", "30s", "1min", "2min", "5min", "10min", "15min",
    "20min", "30min", "1h")]
WINDOW_MARGIN = pd.Timedelta("1h")  # samples read before a period when max_age is not set


def read_long(paths: list[Path], layouts: list[LongLayout], points: pd.DataFrame | None,
              timezone: str, settings: SnapshotSettings, period: Period | None,
              limit: int | None, log: ProblemLog) -> pd.DataFrame | None:
    """The long exports as one wide time × tag frame (UTC index ``timestamp``), problems
    logged; None when the aligned table would exceed ``limit`` bytes (an error logged)."""
    start, end = period or (None, None)
    reach = settings.max_age or settings.interval or WINDOW_MARGIN
    window = (None if start is None else start - reach, end)
    samples, ctx = read_samples(paths, layouts, points, timezone, settings, window, log)
    arrays = samples.arrays()
    ctx.texts = samples.texts
    for name, (count, seq) in samples.unknown_tags.items():
        rel, row = seq_place(seq, ctx.files)
        log.warning(rel, row, name, f"{count} sample(s) of '{name}', not a tag of the point list; "
                    "not loaded" + (" (the first in this row)" if count > 1 else ""),
                    count=count)
    index = pd.DatetimeIndex([], tz="UTC", name="timestamp").as_unit("ns")
    if not len(arrays["time"]):
        return pd.DataFrame(np.empty((0, len(ctx.tags))), index=index,
                            columns=pd.Index(ctx.tags, dtype=str))
    arrays = _without_repeats(arrays, ctx, log)
    interval = settings.interval or _inferred(arrays, ctx, log)
    max_age = settings.max_age or interval
    grid = _grid(arrays["time"], interval, max_age, period)
    label = ctx.files[0] if len(ctx.files) == 1 else "snapshots"
    if refuse_if_too_large([FileRows(label, len(grid), True)], len(ctx.tags), limit, log):
        return None
    first = start.value if start is not None else np.iinfo(np.int64).min
    values = _align(arrays, grid, max_age, ctx, timezone, first)
    frame = pd.DataFrame(values, index=pd.DatetimeIndex(grid, tz="UTC", name="timestamp"),
                         columns=pd.Index(ctx.tags, dtype=str))
    return frame


def _order(arrays: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    order = np.lexsort((arrays["seq"], arrays["time"], arrays["tag"]))
    return {k: v[order] for k, v in arrays.items()}


def _without_repeats(arrays: dict[str, np.ndarray], ctx: Reading,
                     log: ProblemLog) -> dict[str, np.ndarray]:
    """Sorted by tag, time and file/row; of samples repeating a (tag, time) the last stays."""
    arrays = _order(arrays)
    same = (arrays["tag"][1:] == arrays["tag"][:-1]) & (arrays["time"][1:] == arrays["time"][:-1])
    if not same.any():
        return arrays
    dropped = np.r_[same, False]  # a sample followed by one of the same tag and time
    for tag in np.unique(arrays["tag"][dropped]):
        where = np.flatnonzero(dropped & (arrays["tag"] == tag))
        rel, row = seq_place(int(arrays["seq"][where[0] + 1]), ctx.files)
        n = len(where)
        log.warning(rel, row, ctx.tags[tag],
                    f"{n} sample(s) repeat the time of an earlier sample of this point; the "
                    "later file or row is kept" + (" (the first in this row)" if n > 1 else ""),
                    count=n)
    return {k: v[~dropped] for k, v in arrays.items()}


def _inferred(arrays: dict[str, np.ndarray], ctx: Reading, log: ProblemLog) -> pd.Timedelta:
    """The grid interval inferred from the samples (see :func:`infer_interval`), stated in a
    warning."""
    interval, how = infer_interval(arrays["tag"], arrays["time"])
    log.warning(ctx.files[0] if len(ctx.files) == 1 else "snapshots", None, None,
                f"long exports put on a grid of one snapshot every {duration_text(interval)}, "
                f"{how}; set interval in [snapshots] of site.toml to choose it")
    return interval


def infer_interval(tags: np.ndarray, times: np.ndarray) -> tuple[pd.Timedelta, str]:
    """The median spacing of each point's consecutive samples (``tags``/``times`` sorted by
    tag, then time; UTC ns), rounded to a whole second and to a common interval within
    10 %, with a phrase saying how it was found."""
    same = tags[1:] == tags[:-1]
    steps = np.diff(times)[same]
    steps = steps[steps > 0]
    if not len(steps):
        return pd.Timedelta("1min"), "no point has two samples: one minute assumed"
    median = pd.Timedelta(int(np.median(steps)), unit="ns")
    interval = max(median.round("1s"), pd.Timedelta("1s"))
    near = min(COMMON_INTERVALS, key=lambda c: abs(c - interval))
    if abs(near - interval) <= 0.1 * near:
        interval = near
    return interval, f"inferred from the samples (median spacing {median.total_seconds():g} s)"


def duration_text(t: pd.Timedelta) -> str:
    """``1 min``, ``30 s``, ``1 h``."""
    seconds = t.total_seconds()
    if seconds % 3600 == 0:
        return f"{seconds / 3600:g} h"
    return f"{seconds / 60:g} min" if seconds % 60 == 0 else f"{seconds:g} s"


def _grid(times: np.ndarray, interval: pd.Timedelta, max_age: pd.Timedelta,
          period: Period | None) -> np.ndarray:
    """The grid times (UTC ns) with some sample younger than ``max_age``, inside ``period``."""
    step, age = int(interval.value), int(max_age.value)
    first = -(-int(times.min()) // step) * step
    # no grid time after the one the latest sample serves first: values held past the end of
    # the exports would be snapshots without a single fresh sample
    last = min((int(times.max()) + age - 1) // step, -(-int(times.max()) // step)) * step
    grid = np.arange(first, last + 1, step, dtype=np.int64)
    start, end = period or (None, None)
    if start is not None:
        grid = grid[grid >= start.value]
    if end is not None:
        grid = grid[grid <= end.value]
    unique = np.unique(times)
    latest = np.searchsorted(unique, grid, side="right") - 1
    served = (latest >= 0) & (grid - unique[np.maximum(latest, 0)] < age)
    return grid[served]


def _align(arrays: dict[str, np.ndarray], grid: np.ndarray, max_age: pd.Timedelta,
           ctx: Reading, timezone: str, start: int) -> np.ndarray:
    """The grid × tag values by the rule, with the per-point reports (of the samples from
    ``start`` on, UTC ns, and those used before it)."""
    values = np.full((len(grid), len(ctx.tags)), np.nan)
    tags, starts = np.unique(arrays["tag"], return_index=True)
    ends = np.r_[starts[1:], len(arrays["tag"])]
    age = int(max_age.value)
    for tag, a, b in zip(tags, starts, ends, strict=True):
        times = arrays["time"][a:b]
        latest = np.searchsorted(times, grid, side="right") - 1
        fresh = (latest >= 0) & (grid - times[np.maximum(latest, 0)] < age)
        pick = latest[fresh]
        usable = arrays["validity"][a:b][pick] != Validity.BAD
        column = np.full(len(grid), np.nan)
        column[np.flatnonzero(fresh)[usable]] = arrays["value"][a:b][pick[usable]]
        values[:, tag] = column
        held = int((grid[fresh][usable] != times[pick[usable]]).sum())
        used = np.zeros(b - a, bool)
        used[pick] = True
        scope = used | (times >= start)
        _report_point(arrays, slice(a, b), int(tag), held, ~used & scope, scope, ctx,
                      timezone, max_age)
    return values


_REASONS = {
    BAD_QUALITY: "value(s) marked bad (read as missing)",
    UNKNOWN_CODE: "value(s) with the unknown quality code '{}' (read as missing as if bad; "
                  "map the site's codes in [snapshots.quality] of site.toml)",
    NOT_A_NUMBER: "value(s) not a finite number, such as '{}' (read as missing)",
    EMPTY: "sample(s) without a value (read as missing)",
    BAD_STATUS: "status value(s) other than 1 (closed) or 0 (open), such as {} "
                "(read as missing)",
}


def _first(arrays: dict[str, np.ndarray], where: np.ndarray, ctx: Reading) -> tuple[str, int]:
    return seq_place(int(arrays["seq"][where].min()), ctx.files)


def _quality_column(ctx: Reading, rel: str) -> str:
    layout = ctx.layouts[ctx.files.index(rel)]
    return layout.names[layout.quality]


def _report_point(arrays: dict[str, np.ndarray], rows: slice, tag: int, held: int,
                  unused: np.ndarray, scope: np.ndarray, ctx: Reading, timezone: str,
                  max_age: pd.Timedelta) -> None:
    """The counted warnings of one point's samples in ``scope`` (each with its first file
    and row)."""
    log, name = ctx.log, ctx.tags[tag]
    seqs = np.arange(rows.start, rows.stop)
    reason = np.where(scope, arrays["reason"][rows], -1)
    for why, text in _REASONS.items():
        where = seqs[reason == why]
        if len(where):
            rel, row = _first(arrays, where, ctx)
            quoted = text.format(ctx.texts.get((tag, why), ""))
            layout = ctx.layouts[ctx.files.index(rel)]
            column = layout.names[layout.quality if why in (BAD_QUALITY, UNKNOWN_CODE)
                                  else layout.value]
            log.warning(rel, row, column, f"point '{name}': {len(where)} {quoted}, the first "
                        "in this row", count=len(where))
    # Warnings read from the quality codes name the quality column and the point.
    questionable = seqs[scope & (arrays["validity"][rows] == Validity.QUESTIONABLE)]
    if len(questionable):
        rel, row = _first(arrays, questionable, ctx)
        log.warning(rel, row, _quality_column(ctx, rel),
                    f"point '{name}': {len(questionable)} value(s) marked questionable (used), "
                    "the first in this row", count=len(questionable))
    source = arrays["source"][rows]
    for code, word in SOURCE_WORDS.items():
        where = np.flatnonzero(scope & (source == code))
        if not len(where):
            continue
        rel, row = _first(arrays, seqs[where], ctx)
        log.warning(rel, row, _quality_column(ctx, rel),
                    f"point '{name}': " + source_message(word, arrays["time"][rows][where],
                                                         timezone)
                    + ", the first in this row", count=len(where))
    if held:
        rel, _ = _first(arrays, seqs, ctx)
        log.warning(rel, None, name, f"{held} snapshot value(s) held from an earlier sample "
                    f"(younger than {duration_text(max_age)}) to the snapshot time", count=held)
    if unused.any():
        rel, row = _first(arrays, seqs[unused], ctx)
        n = int(unused.sum())
        log.warning(rel, row, name, f"{n} sample(s) not used: a later sample came before the "
                    "next snapshot time, or none came within the maximum age; the first in "
                    "this row", count=n)



def split_long(paths: list[Path], tags: pd.Index | None,
               ) -> tuple[list[tuple[Path, LongLayout]], list[Path]]:
    """The long exports among ``paths`` (with their layouts) and the wide tables."""
    long, wide = [], []
    for path in paths:
        header = header_of(path)
        layout = long_layout(header[0], tags) if header is not None else None
        if layout is None:
            wide.append(path)
        else:
            long.append((path, layout))
    return long, wide


def long_times(path: Path, layout: LongLayout, timezone: str) -> pd.DatetimeIndex:
    """The minutes that hold a sample of a long export (sample times rounded up to the whole
    minute; UTC, sorted, unique): the days a history covers, read chunk by chunk in the memory
    of one chunk and the minutes. Problems are left to the reading of each period."""
    minute = 60 * 10**9
    found = np.empty(0, np.int64)
    try:
        for chunk, rows in chunks(path, layout, (None, None), timezone):
            times, _ = sample_times(chunk.iloc[:, 1], rows, timezone, "")
            stamps = times.asi8[np.asarray(times.notna())]
            found = np.union1d(found, -(-stamps // minute) * minute)
    except Exception:  # noqa: BLE001 - the reading of each period reports the file
        pass
    return pd.DatetimeIndex(found.astype("M8[ns]"), tz="UTC", name="timestamp")


def long_plan(path: Path, layout: LongLayout, rel: str, timezone: str,
              period: Period) -> FilePlan:
    """A long export's plan: its sample times (the file is read again for each period)."""
    times = long_times(path, layout, timezone)
    return FilePlan(path, rel, layout.names, times, np.zeros(len(times), bool), 0,
                    long=layout).within(period)
