"""Reading only a period of a snapshot file, in bounded memory.

A long history (a year of one-minute data) need not fit in memory to review a week of it.
A file is read twice, in chunks: first only its ``timestamp`` column, whose times are parsed
as a whole (so daylight-saving repeats are placed as when the whole file is read) and
reported; then every column, keeping only the rows whose time falls in the period (and rows
without a time, so that values without a time are still reported). Memory holds the times,
one chunk and the kept rows. Cells outside the period are not checked.
"""

from __future__ import annotations

import csv
import gzip
import io
import warnings
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from calibra.io.problems import ProblemLog
from calibra.io.text_files import (
    Dialect,
    csv_records,
    first_line,
    header_problem,
    sniff_dialect,
)
from calibra.io.timestamps import parse_times

CHUNK_ROWS = 50_000
HEAD_BYTES = 64 * 2**10

Period = tuple[pd.Timestamp | None, pd.Timestamp | None]


@dataclass
class FilePlan:
    """What the first pass learned about one file: its times and which rows to keep."""

    path: Path
    rel: str
    names: list[str]
    times: pd.DatetimeIndex  # UTC per data row, NaT where the row has no usable time
    keep: np.ndarray  # bool per data row
    in_period: int
    encoding: str = "utf-8-sig"
    dialect: Dialect = Dialect()
    index_column: int = 0  # Parquet: position of the timestamp column in the file
    untimed: np.ndarray | None = None  # rows whose time cell is empty (kept in every period)
    long: object = None  # a long export's LongLayout (times: its sample times)

    def within(self, period: Period) -> FilePlan:
        """The same file planned for another period (the times are not read again)."""
        inside = in_period(self.times, period)
        untimed = self.untimed if self.untimed is not None else np.zeros(inside.size, bool)
        return replace(self, keep=inside | untimed, in_period=int(inside.sum()))


def in_period(times: pd.DatetimeIndex, period: Period) -> np.ndarray:
    """True where a time lies in the period (both ends included)."""
    start, end = period
    inside = np.asarray(times.notna())
    if start is not None:
        inside &= np.asarray(times >= start)
    if end is not None:
        inside &= np.asarray(times <= end)
    return inside


def _stamp_empty(stamps: pd.Series) -> np.ndarray:
    empty = stamps.isna().to_numpy().copy()
    if not pd.api.types.is_datetime64_any_dtype(stamps.dtype):
        empty |= stamps.astype(str).str.strip().eq("").to_numpy()
    return empty


def _plan(path: Path, rel: str, names: list[str], stamps: pd.Series, timezone: str,
          period: Period, log: ProblemLog, **extra) -> FilePlan:
    rows = np.arange(2, len(stamps) + 2)
    times = parse_times(stamps.reset_index(drop=True), rows, timezone, file=rel, log=log)
    inside = in_period(times, period)
    untimed = np.asarray(times.isna()) & _stamp_empty(stamps)
    return FilePlan(path, rel, names, times, inside | untimed, int(inside.sum()),
                    untimed=untimed, **extra)


# ----------------------------------------------------------------------------- CSV
def _open_text(path: Path, encoding: str) -> io.TextIOWrapper:
    raw = gzip.open(path, "rb") if path.name.lower().endswith(".gz") else path.open("rb")
    return io.TextIOWrapper(raw, encoding=encoding, newline="")


def _csv_chunks(plan: FilePlan, **options):
    """pandas chunks of the data rows (header skipped) of a CSV file."""
    handle = _open_text(plan.path, plan.encoding)
    return handle, pd.read_csv(
        handle, sep=plan.dialect.sep, header=None, skiprows=1, index_col=False,
        keep_default_na=False, skip_blank_lines=False, chunksize=CHUNK_ROWS, **options)


def _csv_times(plan: FilePlan) -> pd.Series:
    handle, chunks = _csv_chunks(plan, usecols=[0], dtype=str)
    with handle, chunks:
        parts = [chunk.iloc[:, 0] for chunk in chunks]
    return pd.concat(parts, ignore_index=True) if parts else pd.Series([], dtype=str)


def plan_csv(path: Path, rel: str, timezone: str, period: Period,
             log: ProblemLog) -> FilePlan | None:
    """First pass over a CSV file: encoding, dialect, header and times."""
    plan = FilePlan(path, rel, [], pd.DatetimeIndex([]), np.zeros(0, bool), 0)
    for encoding in ("utf-8-sig", "latin-1"):
        plan.encoding = encoding
        try:
            with _open_text(path, encoding) as handle:
                head = handle.read(HEAD_BYTES)
                while first_line(head) == head and (more := handle.read(HEAD_BYTES)):
                    head += more  # a header longer than HEAD_BYTES (thousands of tags)
            problem = header_problem(head)
            if problem is not None:
                log.error(rel, None if problem == "the file is empty" else 1, None, problem)
                return None
            plan.dialect = sniff_dialect(head)
            plan.names = [n.strip() for n in next(csv_records(head, plan.dialect.sep))]
            stamps = _csv_times(plan)
        except UnicodeDecodeError:
            continue
        except (OSError, EOFError, pd.errors.ParserError, ValueError, csv.Error) as exc:
            log.error(rel, None, None, f"cannot read the file: {str(exc).splitlines()[0]}")
            return None
        if encoding == "latin-1":
            log.warning(rel, None, None, "not valid UTF-8; read as Latin-1 (ISO 8859-1) — "
                        "check accented names")
        if plan.dialect.sep != ",":
            log.warning(rel, None, None, f"read as {plan.dialect.describe()}")
        return _plan(path, rel, plan.names, stamps, timezone, period, log,
                     encoding=encoding, dialect=plan.dialect)
    return None  # Latin-1 decodes every byte: not reached


def read_csv_rows(plan: FilePlan, log: ProblemLog) -> pd.DataFrame | None:
    """Second pass: the kept rows of a CSV file (a positional index into the data rows)."""
    width = len(plan.names)
    parts = []
    handle, chunks = _csv_chunks(plan, decimal=plan.dialect.decimal, dtype={0: str},
                                 names=list(range(width)), na_values=[""], low_memory=False)
    with warnings.catch_warnings(record=True) as caught, handle, chunks:
        warnings.simplefilter("always", pd.errors.ParserWarning)
        try:
            for chunk in chunks:
                wanted = plan.keep[chunk.index.to_numpy()]
                if wanted.any():
                    parts.append(chunk[wanted])
        except (pd.errors.ParserError, ValueError) as exc:
            log.error(plan.rel, None, None, f"not readable as a table: {str(exc).strip()}")
            return None
    if any(issubclass(w.category, pd.errors.ParserWarning) for w in caught):
        log.error(plan.rel, None, None,
                  f"rows with more values than the {width} columns named in the header")
        return None
    table = pd.concat(parts) if parts else pd.DataFrame(columns=range(width))
    table.columns = plan.names
    return table


# ----------------------------------------------------------------------------- Parquet
def plan_parquet(path: Path, rel: str, timezone: str, period: Period,
                 log: ProblemLog) -> FilePlan | None:
    """First pass over a Parquet file: its schema and the timestamp column."""
    try:
        parquet = pq.ParquetFile(path)
        names = [str(n).strip() for n in parquet.schema_arrow.names]
        metadata = parquet.schema_arrow.pandas_metadata or {}
        at = 0
        if names and names[0].lower() != "timestamp" and "timestamp" in (
                metadata.get("index_columns") or []):
            at = names.index("timestamp")
        if not names or names[at].lower() != "timestamp":
            log.error(rel, 1, names[0] if names else None,
                      "the first column must be 'timestamp'")
            return None
        if names.count(names[at]) > 1:
            log.error(rel, 1, names[at], "column appears twice")
            return None
        stamps = parquet.read(columns=[parquet.schema_arrow.names[at]]).column(0).to_pandas()
    except Exception as exc:  # noqa: BLE001 - pyarrow raises many kinds; all mean "unreadable"
        log.error(rel, None, None, f"cannot read as Parquet: {str(exc).splitlines()[0]}")
        return None
    names = [names[at], *names[:at], *names[at + 1:]]
    return _plan(path, rel, names, stamps, timezone, period, log, index_column=at)


def read_parquet_rows(plan: FilePlan) -> pd.DataFrame:
    """Second pass: the kept rows of a Parquet file, timestamp column first."""
    parquet = pq.ParquetFile(plan.path)
    sizes = [parquet.metadata.row_group(g).num_rows for g in range(parquet.num_row_groups)]
    starts = np.r_[0, np.cumsum(sizes)].astype(np.int64)
    # Only the row groups that hold a kept row are read (a day out of a month-long file).
    groups = [g for g in range(len(sizes)) if plan.keep[starts[g]:starts[g + 1]].any()]
    kept = []
    for g in groups:
        start = int(starts[g])
        for batch in parquet.iter_batches(batch_size=CHUNK_ROWS, row_groups=[g]):
            wanted = plan.keep[start:start + batch.num_rows]
            if wanted.any():
                kept.append(batch.filter(pa.array(wanted)))
            start += batch.num_rows
    table = pa.Table.from_batches(kept, schema=parquet.schema_arrow).to_pandas(
        ignore_metadata=True)
    order = [plan.index_column, *(k for k in range(table.shape[1]) if k != plan.index_column)]
    table = table.iloc[:, order]
    table.index = np.flatnonzero(plan.keep)
    return table
