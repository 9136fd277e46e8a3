"""A first look at a user's historian exports before a site folder is built from them
(``calibra import``): each file's kind (long export or wide table), the tags, the time range,
the snapshot interval the loader would infer and the points stored more sparsely than it
(report by exception).

The files are read with the loader's own readers (:mod:`calibra.io.long_table` chunk by
chunk, :mod:`calibra.io.snapshot_period` for wide tables) and nothing is kept but times and
tags; values are read by the loader once the folder is built.
"""

from __future__ import annotations

import enum
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from calibra.io.long_align import infer_interval, split_long
from calibra.io.long_table import chunks, sample_times
from calibra.io.problems import ProblemLog
from calibra.io.snapshot_period import plan_csv, plan_parquet
from calibra.io.snapshots import SNAPSHOT_SUFFIXES
from calibra.io.wide_quality import is_quality_column
from calibra.progress import Cancelled, Progress

#: A point whose samples are further apart than this many intervals is stored sparsely.
SPARSE_FACTOR = 2


class ExportKind(enum.StrEnum):
    """The two shapes of snapshot file the loader reads."""

    LONG = "long export"  # one row per sample: tag, time, value, quality
    WIDE = "wide table"  # a timestamp column, one column per tag


@dataclass(frozen=True)
class HistoryFile:
    """One export: its path, kind, the rows (samples or snapshots) with a time, the tags,
    the first and last time (UTC), the quality column's header (long exports)."""

    path: Path
    kind: ExportKind
    rows: int
    tags: frozenset[str]
    first: pd.Timestamp | None
    last: pd.Timestamp | None
    quality: str | None = None


@dataclass(frozen=True)
class HistorySummary:
    """All exports together: the files, every tag, the time range, the interval long exports
    would be put on (None without long exports) with how it was found, and the points whose
    median spacing is more than :data:`SPARSE_FACTOR` intervals (tag → median spacing)."""

    files: tuple[HistoryFile, ...]
    tags: frozenset[str]
    first: pd.Timestamp | None
    last: pd.Timestamp | None
    interval: pd.Timedelta | None
    interval_note: str
    sparse: dict[str, pd.Timedelta]


def history_suffix_ok(path: Path) -> bool:
    """Whether the loader reads a file of this name as a snapshot file."""
    return path.name.lower().endswith(SNAPSHOT_SUFFIXES)


def scan_history(paths: list[Path], labels: list[str], timezone: str, log: ProblemLog,
                 progress: Progress | None = None,
                 interval: pd.Timedelta | None = None) -> HistorySummary:
    """The summary of the exports at ``paths`` (problems name them by ``labels``); naive times
    are read in ``timezone``. ``interval``: the one the user gives (else inferred)."""
    long, _ = split_long(paths, None)
    layouts = {path: layout for path, layout in long}
    files: list[HistoryFile] = []
    tag_codes: list[np.ndarray] = []
    tag_times: list[np.ndarray] = []
    names: dict[str, int] = {}
    for number, (path, label) in enumerate(zip(paths, labels, strict=True)):
        if progress is not None:
            progress.update(number, len(paths), "reading the historian exports")
        layout = layouts.get(path)
        if layout is None:
            found = _wide(path, label, timezone, log)
        else:
            def tick(number=number) -> None:
                if progress is not None:  # also where a cancel takes effect
                    progress.update(number, len(paths), "reading the historian exports")

            found, codes, times = _long(path, label, layout, timezone, names, log, tick)
            tag_codes.append(codes)
            tag_times.append(times)
        if found is not None:
            files.append(found)
    if progress is not None:
        progress.update(len(paths), len(paths), "reading the historian exports")
    firsts = [f.first for f in files if f.first is not None]
    lasts = [f.last for f in files if f.last is not None]
    tags = frozenset().union(*(f.tags for f in files)) if files else frozenset()
    note, sparse = "", {}
    if tag_codes:
        codes, times = np.concatenate(tag_codes), np.concatenate(tag_times)
        order = np.lexsort((times, codes))
        codes, times = codes[order], times[order]
        if interval is None:
            interval, note = infer_interval(codes, times)
        else:
            note = "given"
        sparse = _sparse(codes, times, list(names), interval)
    return HistorySummary(tuple(files), tags, min(firsts) if firsts else None,
                          max(lasts) if lasts else None, interval, note, sparse)


def _long(path: Path, label: str, layout, timezone: str, names: dict[str, int],
          log: ProblemLog, tick):
    """A long export's tags and sample times (tag codes into ``names``)."""
    codes, times, seen = [], [], set()
    try:
        for chunk, rows in chunks(path, layout, (None, None), timezone):
            stamp, _ = sample_times(chunk.iloc[:, 1], rows, timezone, label)
            timed = np.asarray(stamp.notna())
            tag = chunk.iloc[:, 0].astype(str).str.strip().where(chunk.iloc[:, 0].notna(), "")
            keep = timed & tag.ne("").to_numpy()
            inverse, uniques = pd.factorize(tag[keep])
            lookup = np.array([names.setdefault(str(u), len(names)) for u in uniques], np.int64)
            codes.append(lookup[inverse] if len(uniques) else np.empty(0, np.int64))
            times.append(stamp.asi8[keep])
            seen.update(str(u) for u in uniques)
            tick()
    except Cancelled:
        raise
    except Exception as exc:  # noqa: BLE001 - pandas/pyarrow raise many kinds
        text = (str(exc).strip().splitlines() or [type(exc).__name__])[0]
        log.error(label, None, None, f"cannot read the long export: {text}")
        return None, np.empty(0, np.int64), np.empty(0, np.int64)
    code = np.concatenate(codes) if codes else np.empty(0, np.int64)
    stamp = np.concatenate(times) if times else np.empty(0, np.int64)
    first, last = (pd.Timestamp(int(f(stamp)), tz="UTC") if len(stamp) else None
                   for f in (np.min, np.max))
    quality = layout.names[layout.quality] if layout.quality is not None else None
    return (HistoryFile(path, ExportKind.LONG, len(stamp), frozenset(seen), first, last,
                        quality), code, stamp)


def _wide(path: Path, label: str, timezone: str, log: ProblemLog) -> HistoryFile | None:
    planner = plan_parquet if path.name.lower().endswith(".parquet") else plan_csv
    plan = planner(path, label, timezone, (None, None), log)
    if plan is None:
        return None
    times = plan.times[plan.times.notna()]
    tags = frozenset(n for n in plan.names[1:] if n and not is_quality_column(n))
    return HistoryFile(path, ExportKind.WIDE, len(times), tags,
                       times.min() if len(times) else None, times.max() if len(times) else None)


def _sparse(codes: np.ndarray, times: np.ndarray, tags: list[str],
            interval: pd.Timedelta) -> dict[str, pd.Timedelta]:
    """Tags whose median spacing of samples exceeds SPARSE_FACTOR intervals."""
    out = {}
    starts = np.flatnonzero(np.r_[True, codes[1:] != codes[:-1]])
    for begin, end in zip(starts, np.r_[starts[1:], len(codes)], strict=True):
        steps = np.diff(times[begin:end])
        steps = steps[steps > 0]
        if len(steps) and np.median(steps) > SPARSE_FACTOR * interval.value:
            out[tags[codes[begin]]] = pd.Timedelta(int(np.median(steps)), unit="ns").round("1s")
    return dict(sorted(out.items()))
