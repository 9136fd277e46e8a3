"""Long historian exports: one row per sample (tag, time, value, optional quality).

A snapshot file is a long export when its header names a tag column (``tag``, ``point``,
``name``, ``tagname``), a time column (``timestamp``, ``time``, ``datetime``) and a value
column (``value``, ``val``); a quality column (``quality``, ``status``, ``q``) is optional and
other columns are ignored with a warning. Such files (CSV, CSV.gz or Parquet, any number, rows
in any order) are read in chunks of ``CHUNK_ROWS`` rows; only the rows near the period asked
for are kept (Parquet row groups outside it are not read), as compact arrays of samples. Then
:mod:`calibra.io.long_align` puts the samples on the snapshot grid.
"""

from __future__ import annotations

import csv
import gzip
import io
import warnings
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from calibra.io.problems import ProblemLog
from calibra.io.quality import Source, Validity, classify_column
from calibra.io.snapshot_period import Period
from calibra.io.snapshot_settings import SnapshotSettings
from calibra.io.text_files import Dialect, csv_records, first_line, sniff_dialect
from calibra.io.timestamps import parse_times
from calibra.model.points import STATUS_QUANTITY

CHUNK_ROWS = 200_000
HEAD_CHARS = 64 * 2**10
ROLE_NAMES = {
    "tag": ("tag", "point", "name", "tagname", "tag_name", "point_name"),
    "time": ("timestamp", "time", "datetime", "date_time"),
    "value": ("value", "val"),
    "quality": ("quality", "status", "q", "quality_code"),
}
#: Why a sample is not used as it is (one code per sample).
OK, BAD_QUALITY, UNKNOWN_CODE, NOT_A_NUMBER, EMPTY, BAD_STATUS = range(6)
SEQ_ROW_BITS = 40  # a sample's order key: file number << 40 | row


@dataclass(frozen=True)
class LongLayout:
    """Where the roles are in a long export's header (positions) and the header itself."""

    names: list[str]
    tag: int
    time: int
    value: int
    quality: int | None


def long_layout(names: list[str], tags: pd.Index | None = None) -> LongLayout | None:
    """The layout when ``names`` is a long export's header (one column of each role), else
    None. A header whose tag or value column is itself a point's tag is a wide table."""
    lower = [n.strip().lower() for n in names]
    found: dict[str, int] = {}
    for role, aliases in ROLE_NAMES.items():
        hits = [k for k, n in enumerate(lower) if n in aliases]
        if len(hits) > 1 and role != "quality":
            return None
        if hits:
            found[role] = hits[0]
    if not {"tag", "time", "value"} <= found.keys():
        return None
    if tags is not None and any(names[found[r]].strip() in tags for r in ("tag", "value")):
        return None
    return LongLayout([n.strip() for n in names], found["tag"], found["time"], found["value"],
                      found.get("quality"))


def _open_text(path: Path, encoding: str) -> io.TextIOWrapper:
    raw = gzip.open(path, "rb") if path.name.lower().endswith(".gz") else path.open("rb")
    return io.TextIOWrapper(raw, encoding=encoding, newline="")


def header_of(path: Path) -> tuple[list[str], Dialect, str] | None:
    """A snapshot file's column names (with the CSV dialect and encoding); None when the
    header cannot be read (the wide reader then reports the file)."""
    try:
        if path.name.lower().endswith(".parquet"):
            return [str(n) for n in pq.ParquetFile(path).schema_arrow.names], Dialect(), ""
        for encoding in ("utf-8-sig", "latin-1"):
            try:
                with _open_text(path, encoding) as handle:
                    head = handle.read(HEAD_CHARS)
            except UnicodeDecodeError:
                continue
            dialect = sniff_dialect(head)  # the decimal mark from the first data rows
            return next(csv_records(first_line(head), dialect.sep), []), dialect, encoding
    except Exception:  # noqa: BLE001 - any unreadable file is reported by the wide reader
        return None
    return None


@dataclass
class Samples:
    """Every kept sample as arrays (one entry per sample), and the texts quoted in reports."""

    tag: list[np.ndarray] = field(default_factory=list)  # position in ``tags``
    time: list[np.ndarray] = field(default_factory=list)  # UTC ns
    value: list[np.ndarray] = field(default_factory=list)
    validity: list[np.ndarray] = field(default_factory=list)
    source: list[np.ndarray] = field(default_factory=list)
    reason: list[np.ndarray] = field(default_factory=list)
    seq: list[np.ndarray] = field(default_factory=list)  # file << 40 | row
    texts: dict[tuple[int, int], str] = field(default_factory=dict)  # (tag, reason) → text
    unknown_tags: dict[str, list[int]] = field(default_factory=dict)  # tag → [count, seq]

    def arrays(self) -> dict[str, np.ndarray]:
        """The samples concatenated."""
        kinds = {"tag": np.int32, "time": np.int64, "value": np.float64, "validity": np.int8,
                 "source": np.int8, "reason": np.int8, "seq": np.int64}
        return {k: (np.concatenate(getattr(self, k)) if getattr(self, k)
                    else np.empty(0, dtype)).astype(dtype, copy=False)
                for k, dtype in kinds.items()}


@dataclass
class Reading:
    """What every chunk needs: the tags, the settings and where the problems go."""

    tags: list[str]
    index: dict[str, int]
    status: np.ndarray  # bool per tag position: a branch status point
    timezone: str
    settings: SnapshotSettings
    window: Period
    log: ProblemLog
    known: bool  # tags come from the point list (others are reported)
    files: list[str] = field(default_factory=list)
    texts: dict[tuple[int, int], str] = field(default_factory=dict)
    layouts: list[LongLayout] = field(default_factory=list)


def read_samples(paths: list[Path], layouts: list[LongLayout], points: pd.DataFrame | None,
                 timezone: str, settings: SnapshotSettings, window: Period,
                 log: ProblemLog) -> tuple[Samples, Reading]:
    """Every long export's samples whose time lies in ``window`` (both ends included)."""
    tags = [] if points is None else [str(t) for t in points.index]
    status = (np.asarray(points["quantity"].eq(STATUS_QUANTITY)) if points is not None
              else np.zeros(0, bool))
    ctx = Reading(tags, {t: k for k, t in enumerate(tags)}, status, timezone, settings,
                  window, log, points is not None)
    samples = Samples()
    for number, (path, layout) in enumerate(zip(paths, layouts, strict=True)):
        rel = f"snapshots/{path.name}"
        ctx.files.append(rel)
        ctx.layouts.append(layout)
        extra = [n for k, n in enumerate(layout.names)
                 if k not in (layout.tag, layout.time, layout.value, layout.quality) and n]
        if extra:
            log.warning(rel, 1, extra[0], f"long export: {len(extra)} column(s) other than tag, "
                        f"time, value and quality ignored ({', '.join(extra[:5])})",
                        count=len(extra))
        _read_one(path, layout, number, rel, ctx, samples)
    return samples, ctx


def _read_one(path: Path, layout: LongLayout, number: int, rel: str, ctx: Reading,
              samples: Samples) -> None:
    """One long export's samples added to ``samples``; its problems logged."""
    log, seen = ctx.log, 0
    header = header_of(path)
    if header is not None and header[1].sep != ",":
        log.warning(rel, None, None, f"read as {header[1].describe()}")
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", pd.errors.ParserWarning)
            for chunk, rows in chunks(path, layout, ctx.window, ctx.timezone):
                seen += len(chunk)
                _chunk(chunk, rows, number, rel, layout, ctx, samples)
    except pd.errors.EmptyDataError:
        pass  # reported below: no rows
    except Exception as exc:  # noqa: BLE001 - pandas/pyarrow raise many kinds
        text = (str(exc).strip().splitlines() or [type(exc).__name__])[0]
        log.error(rel, None, None, f"cannot read the long export: {text}")
        return
    width = len(layout.names)
    if any(issubclass(w.category, pd.errors.ParserWarning) for w in caught):
        log.per_row(rel, _rows_with_extra_values(path, header, width) or [2], None,
                    f"more values than the {width} columns named in the header",
                    severity="error")
    elif not seen:
        log.warning(rel, None, None, "the file has a header but no data rows")


def _rows_with_extra_values(path: Path, header: tuple[list[str], Dialect, str] | None,
                            width: int) -> list[int]:
    """Spreadsheet rows of a CSV file with non-empty cells beyond the header's columns."""
    if header is None:
        return []
    out = []
    try:
        with _open_text(path, header[2]) as handle:
            for number, record in enumerate(csv.reader(handle, delimiter=header[1].sep), 1):
                if len(record) > width and any(c.strip() for c in record[width:]):
                    out.append(number)
    except (csv.Error, OSError, EOFError, UnicodeDecodeError):
        pass  # the rows found so far (the caller falls back to row 2)
    return out


def chunks(path: Path, layout: LongLayout, window: Period,
            timezone: str) -> Iterator[tuple[pd.DataFrame, np.ndarray]]:
    """(tag, time, value, quality) columns of the file chunk by chunk, with spreadsheet rows."""
    wanted = [layout.tag, layout.time, layout.value]
    if layout.quality is not None:
        wanted.append(layout.quality)
    if path.name.lower().endswith(".parquet"):
        yield from _parquet_chunks(path, wanted, window, timezone)
        return
    _, dialect, encoding = header_of(path) or ([], Dialect(), "utf-8-sig")
    with _open_text(path, encoding) as handle:
        # every column, so that a row with more values than the header names is an error
        reader = pd.read_csv(handle, sep=dialect.sep, header=None, skiprows=1,
                             names=list(range(len(layout.names))),
                             dtype={k: str for k in range(len(layout.names)) if k != layout.value},
                             decimal=dialect.decimal, keep_default_na=False, na_values=[""],
                             skip_blank_lines=False, index_col=False, chunksize=CHUNK_ROWS,
                             engine="c", low_memory=False)
        with reader:
            for chunk in reader:
                chunk = chunk[wanted]
                if chunk.iloc[:, 2].dtype == object and dialect.decimal != ".":
                    chunk.iloc[:, 2] = chunk.iloc[:, 2].str.replace(dialect.decimal, ".")
                yield chunk, chunk.index.to_numpy() + 2


def _parquet_chunks(path: Path, wanted: list[int], window: Period,
                    timezone: str) -> Iterator[tuple[pd.DataFrame, np.ndarray]]:
    parquet = pq.ParquetFile(path)
    names = parquet.schema_arrow.names
    start = 0
    for g in range(parquet.num_row_groups):
        size = parquet.metadata.row_group(g).num_rows
        if _group_outside(parquet, g, wanted[1], window, timezone):
            start += size
            continue
        for batch in parquet.iter_batches(batch_size=CHUNK_ROWS, row_groups=[g],
                                          columns=[names[k] for k in wanted]):
            frame = pa.Table.from_batches([batch]).to_pandas(ignore_metadata=True)
            yield frame, np.arange(start + 2, start + 2 + len(frame))
            start += len(frame)


def _group_outside(parquet: pq.ParquetFile, group: int, column: int, window: Period,
                   timezone: str) -> bool:
    """True when the row group's time statistics show no time in ``window`` (a naive
    datetime column is site time: one day of margin either side)."""
    if window == (None, None):
        return False
    stats = parquet.metadata.row_group(group).column(column).statistics
    kind = parquet.schema_arrow.field(column).type
    if stats is None or not stats.has_min_max or not pa.types.is_timestamp(kind):
        return False
    low, high = pd.Timestamp(stats.min), pd.Timestamp(stats.max)
    margin = pd.Timedelta(0)
    if low.tzinfo is None:
        low, high, margin = low.tz_localize("UTC"), high.tz_localize("UTC"), pd.Timedelta("1D")
    start, end = window
    return bool((start is not None and high + margin < start)
                or (end is not None and low - margin > end))


def _chunk(chunk: pd.DataFrame, rows: np.ndarray, number: int, rel: str, layout: LongLayout,
           ctx: Reading, samples: Samples) -> None:
    """One chunk checked and its kept samples added."""
    names = layout.names
    tag = _stripped(chunk.iloc[:, 0])
    raw_value = chunk.iloc[:, 2]
    numeric = pd.api.types.is_numeric_dtype(raw_value.dtype)
    value_text = (pd.Series("", index=chunk.index) if numeric else
                  raw_value.astype(str).str.strip().where(raw_value.notna(), ""))
    blank = tag.eq("").to_numpy() & chunk.iloc[:, 1].isna().to_numpy()
    if not numeric:
        blank &= value_text.eq("").to_numpy()
    if layout.quality is None:
        codes = pd.Series("", index=chunk.index)
    else:
        codes = chunk.iloc[:, 3]
    times, sub = sample_times(chunk.iloc[:, 1], rows, ctx.timezone, rel)
    for p in sub.items:  # the time column by its own name
        ctx.log.add(p if p.column != "timestamp" else type(p)(
            p.file, p.row, names[layout.time], p.message, p.severity, p.count))
    timed = np.asarray(times.notna())
    no_time = ~timed & ~blank
    no_time[no_time] = _stamp_empty(chunk.iloc[:, 1][no_time])  # unparsed ones are reported
    if no_time.any():
        ctx.log.per_row(rel, rows[no_time], names[layout.time],
                        "a sample without a time; row skipped")
    no_tag = timed & tag.eq("").to_numpy()
    if no_tag.any():
        ctx.log.per_row(rel, rows[no_tag], names[layout.tag],
                        "a sample without a tag; row skipped")
    keep = timed & ~no_tag & _inside(times, ctx.window)
    if not keep.any():
        return
    tag, rows, times = tag[keep], rows[keep], times[keep]
    positions = _positions(tag.to_numpy(), rows, number, ctx, samples)
    known = positions >= 0
    if numeric:
        value = raw_value.to_numpy(dtype=np.float64, na_value=np.nan)[keep]
        empty = np.isnan(value)
    else:
        text = value_text[keep]
        value = pd.to_numeric(text, errors="coerce").to_numpy(dtype=np.float64)
        empty = text.eq("").to_numpy()
    validity, source, unknown = classify_column(codes[keep], ctx.settings.quality,
                                                ctx.settings.numeric_quality)
    reason = np.full(len(value), OK, np.int8)
    reason[validity == Validity.BAD] = BAD_QUALITY
    reason[unknown] = UNKNOWN_CODE
    finite = np.isfinite(value)
    reason[(reason == OK) & empty] = EMPTY
    reason[(reason == OK) & ~finite & ~empty] = NOT_A_NUMBER
    status = np.zeros(len(value), bool)
    status[known] = ctx.status[positions[known]] if ctx.known else False
    reason[(reason == OK) & status & finite & (value != 0) & (value != 1)] = BAD_STATUS
    value = np.where(finite, value, np.nan)
    validity = np.where(reason == OK, validity, np.int8(Validity.BAD)).astype(np.int8)
    quoted = {UNKNOWN_CODE: codes[keep].to_numpy(),
              NOT_A_NUMBER: (value_text if not numeric else raw_value)[keep].to_numpy(),
              BAD_STATUS: value}
    for why, texts in quoted.items():
        for k in np.flatnonzero(known & (reason == why)):
            text = f"{texts[k]:g}" if why == BAD_STATUS else str(texts[k])
            samples.texts.setdefault((int(positions[k]), why), text)
    samples.tag.append(positions[known].astype(np.int32))
    samples.time.append(times.asi8[known])
    samples.value.append(value[known])
    samples.validity.append(validity[known])
    samples.source.append(np.where(reason == OK, source, np.int8(Source.PROCESS))[known])
    samples.reason.append(reason[known])
    samples.seq.append((np.int64(number) << SEQ_ROW_BITS) + rows[known].astype(np.int64))


def _stripped(cells: pd.Series) -> pd.Series:
    """Text cells without surrounding spaces ('' for none), each distinct text once."""
    codes, uniques = pd.factorize(cells, use_na_sentinel=True)
    clean = np.array([str(u).strip() for u in uniques] + [""], dtype=object)
    return pd.Series(clean[codes], index=cells.index)


def sample_times(stamps: pd.Series, rows: np.ndarray, timezone: str,
           rel: str) -> tuple[pd.DatetimeIndex, ProblemLog]:
    """UTC times of the cells: each distinct text parsed once (a long export repeats every
    time for every point); when that finds a problem, every row again so that each problem
    names its own rows."""
    codes, uniques = pd.factorize(stamps.reset_index(drop=True), use_na_sentinel=True)
    sub = ProblemLog()
    if len(uniques) < len(stamps):
        first = np.full(len(uniques), -1, np.int64)
        seen = codes >= 0
        first[codes[seen][::-1]] = np.flatnonzero(seen)[::-1]
        parsed = parse_times(pd.Series(uniques), rows[first], timezone, rel, sub)
        if not sub.items:
            values = np.r_[parsed.asi8, np.iinfo(np.int64).min][codes]
            return pd.DatetimeIndex(values.view("M8[ns]")).tz_localize("UTC"), sub
        sub = ProblemLog()
    return parse_times(stamps.reset_index(drop=True), rows, timezone, rel, sub), sub


def _stamp_empty(stamps: pd.Series) -> np.ndarray:
    empty = stamps.isna().to_numpy().copy()
    if not pd.api.types.is_datetime64_any_dtype(stamps.dtype):
        empty |= stamps.astype(str).str.strip().eq("").to_numpy()
    return empty


def _inside(times: pd.DatetimeIndex, window: Period) -> np.ndarray:
    start, end = window
    inside = np.ones(len(times), bool)
    if start is not None:
        inside &= np.asarray(times >= start)
    if end is not None:
        inside &= np.asarray(times <= end)
    return inside


def _positions(tags: np.ndarray, rows: np.ndarray, number: int, ctx: Reading,
               samples: Samples) -> np.ndarray:
    """The tag position of every sample; -1 for a tag not in the point list (counted)."""
    inverse, uniques = pd.factorize(tags)
    out = np.empty(len(uniques), np.int64)
    for k, name in enumerate(uniques):
        name = str(name)
        if name not in ctx.index:
            if ctx.known:
                where = np.flatnonzero(inverse == k)
                entry = samples.unknown_tags.setdefault(name, [0, -1])
                entry[0] += len(where)
                if entry[1] < 0:
                    entry[1] = (number << SEQ_ROW_BITS) + int(rows[where[0]])
                out[k] = -1
                continue
            ctx.index[name] = len(ctx.tags)
            ctx.tags.append(name)
        out[k] = ctx.index[name]
    return out[inverse]


def seq_place(seq: int, files: list[str]) -> tuple[str, int]:
    """(file, row) of a sample's order key."""
    return files[seq >> SEQ_ROW_BITS], seq & ((1 << SEQ_ROW_BITS) - 1)

