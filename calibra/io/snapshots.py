"""Reading the historian snapshot tables in ``snapshots/`` into one time × tag frame.

Each file is a wide table (``.csv``, ``.csv.gz`` or ``.parquet``): a ``timestamp`` column,
then one column per tag; or a long historian export (tag, time, value, quality columns),
read by :mod:`calibra.io.long_table` and put on the snapshot grid by
:mod:`calibra.io.long_align`. Values stay in the point's own unit as float64; an empty cell is
missing. Cells that cannot be used (text, NaN, infinity, a status other than 0/1) are set
missing and counted per column; rows without a usable time are skipped and reported.
The checks are vectorised over the whole table: a week of one-minute data is fast.
"""

from __future__ import annotations

import csv
import io
import re
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow.parquet as pq

from calibra.io.long_align import long_plan, read_long, split_long
from calibra.io.problems import ProblemLog
from calibra.io.snapshot_period import (
    FilePlan,
    Period,
    plan_csv,
    plan_parquet,
    read_csv_rows,
    read_parquet_rows,
)
from calibra.io.snapshot_reports import SNAPSHOT_DIR, report_absent_tags, report_overlaps
from calibra.io.snapshot_settings import SnapshotSettings
from calibra.io.snapshot_size import FileRows, estimate_rows, refuse_if_too_large
from calibra.io.text_files import csv_records, read_csv_text
from calibra.io.timestamps import parse_times
from calibra.io.wide_quality import Marks, apply_quality, is_quality_column
from calibra.model.points import STATUS_QUANTITY, TAP_QUANTITY

SNAPSHOT_SUFFIXES = (".csv", ".csv.gz", ".parquet")


def empty_snapshots(tags: pd.Index) -> pd.DataFrame:
    """A snapshot frame with no rows, one float column per tag."""
    index = pd.DatetimeIndex([], tz="UTC", name="timestamp").as_unit("ns")
    return pd.DataFrame(np.empty((0, len(tags))), index=index, columns=pd.Index(tags, dtype=str))


def snapshot_files(folder: Path, log: ProblemLog) -> list[Path]:
    """The snapshot files, by name; other files are reported and ignored."""
    directory = folder / SNAPSHOT_DIR
    if not directory.is_dir():
        return []
    files = []
    for path in sorted(directory.iterdir()):
        if path.name.startswith("."):
            continue
        if path.is_file() and path.name.lower().endswith(SNAPSHOT_SUFFIXES):
            files.append(path)
        else:
            log.warning(
                f"{SNAPSHOT_DIR}/{path.name}", None, None,
                "not a snapshot file (.csv, .csv.gz or .parquet); ignored",
            )
    return files


def read_snapshots(
    folder: Path,
    points: pd.DataFrame | None,
    timezone: str,
    log: ProblemLog,
    *,
    required: bool = True,
    period: Period | None = None,
    limit: int | None = None,
    plans: list[FilePlan] | None = None,
    settings: SnapshotSettings | None = None,
) -> pd.DataFrame | None:
    """All snapshot files as one frame: tz-aware UTC index ``timestamp``, one float64 column
    per point of ``points`` (all NaN when a point has no column), rows in time order.

    ``points`` may be None when the point list could not be read: every named column is then
    loaded. Files whose time ranges overlap are reported; a time that appears in several
    files keeps the values of the file that starts first. ``period`` (UTC start, end; either
    may be None) keeps only the snapshots in it, reading the files in chunks. A table larger
    than ``limit`` bytes is refused before any value is read (see
    :mod:`calibra.io.snapshot_size`). Returns None when nothing usable was found and
    snapshots are ``required``, or when the table is refused (an error is logged).
    ``plans``: the files' first passes made before (:func:`plan_files`; with a ``period``),
    so that reading period after period does not read the times again. ``settings``: the
    ``[snapshots]`` table of ``site.toml`` (the grid of long exports, quality codes).
    """
    files = snapshot_files(folder, log) if plans is None else [p.path for p in plans]
    tags = points.index if points is not None else pd.Index([])
    if not files:
        if required:
            log.error(
                SNAPSHOT_DIR, None, None,
                "no snapshot files (.csv, .csv.gz or .parquet) found"
                if (folder / SNAPSHOT_DIR).is_dir() else "folder not found",
            )
            return None
        return empty_snapshots(tags)
    quantities = points["quantity"] if points is not None else None
    errors_before = log.error_count()
    if plans is None:
        long, files = split_long(files, tags if points is not None else None)
    else:
        long = [(p.path, p.long) for p in plans if p.long is not None]
        plans = [p for p in plans if p.long is None]
        files = [p.path for p in plans]
    marks = Marks(settings or SnapshotSettings(), timezone)
    if period is None:
        sizes = [estimate_rows(path, _rel(path)) for path in files]
        if refuse_if_too_large([s for s in sizes if s is not None], len(tags), limit, log):
            return None
        read = [(_rel(path), _read_file(path, _rel(path), quantities, timezone, log, marks))
                for path in files]
    else:
        read = _read_period(files, quantities, len(tags), timezone, period, limit, log, plans,
                            marks)
        if read is None:
            return None
    if long:
        frame = read_long([p for p, _ in long], [lay for _, lay in long], points, timezone,
                          settings or SnapshotSettings(), period, limit, log)
        if frame is None:
            return None
        read.append((_rel(long[0][0]) if len(long) == 1 else SNAPSHOT_DIR, frame))
    frames = [(rel, frame) for rel, frame in read if frame is not None and len(frame)]
    if not frames:
        if required and period is None:
            if log.error_count() == errors_before:
                log.error(SNAPSHOT_DIR, None, None, "no snapshot rows could be read")
            return None
        if period is not None:
            log.warning(SNAPSHOT_DIR, None, None, f"no snapshots {_describe(period)}")
        return empty_snapshots(tags)
    frames.sort(key=lambda item: item[1].index[0])
    report_overlaps(frames, log)
    if points is not None:
        report_absent_tags(frames, tags, log)
    merged = pd.concat([f for _, f in frames], axis=0, sort=False)
    if len(frames) > 1:
        order = np.argsort(merged.index.asi8, kind="stable")
        merged = merged.iloc[order]
        merged = merged[~merged.index.duplicated(keep="first")]
    columns = tags if points is not None else merged.columns
    merged = merged.reindex(columns=pd.Index(columns, dtype=str)).astype(np.float64)
    merged.index.name = "timestamp"
    return merged


def plan_files(folder: Path, timezone: str, log: ProblemLog,
               period: Period = (None, None)) -> list[FilePlan]:
    """The first pass over every snapshot file (its header and times; problems logged);
    files that cannot be read are left out."""
    return _plan_paths(snapshot_files(folder, log), timezone, period, log)


def _plan_paths(files: list[Path], timezone: str, period: Period,
                log: ProblemLog) -> list[FilePlan]:
    long, files = split_long(files, None)
    plans = [long_plan(p, lay, _rel(p), timezone, period) for p, lay in long]
    for path in files:
        planner = plan_parquet if path.name.lower().endswith(".parquet") else plan_csv
        plan = planner(path, _rel(path), timezone, period, log)
        if plan is not None:
            plans.append(plan)
    return plans


def snapshot_times(folder: Path, timezone: str,
                   plans: list[FilePlan] | None = None) -> pd.DatetimeIndex:
    """Every snapshot time of the site's files (UTC, sorted, without repeats), reading only the
    timestamp columns (or taken from ``plans``): the days a long history covers, before any
    value is read. Problems are left to the loader (times that cannot be parsed are skipped
    here)."""
    if plans is None:
        plans = plan_files(folder, timezone, ProblemLog())
    times = [plan.times[plan.times.notna()] for plan in plans]
    if not times:
        return pd.DatetimeIndex([], tz="UTC", name="timestamp")
    out = times[0].append(times[1:]) if len(times) > 1 else times[0]
    return out.unique().sort_values().rename("timestamp")


def _rel(path: Path) -> str:
    return f"{SNAPSHOT_DIR}/{path.name}"


def _read_period(
    files: list[Path], quantities: pd.Series | None, points: int, timezone: str,
    period: Period, limit: int | None, log: ProblemLog,
    planned: list[FilePlan] | None = None, marks: Marks | None = None,
) -> list[tuple[str, pd.DataFrame | None]] | None:
    """The files' rows in ``period``: times first (or the ``planned`` ones), the size check,
    then the kept rows."""
    plans = [plan.within(period) for plan in planned] if planned is not None \
        else _plan_paths(files, timezone, period, log)
    kept = [FileRows(p.rel, p.in_period, True) for p in plans]
    if refuse_if_too_large(kept, points, limit, log, period=_describe(period)):
        return None
    read = []
    for plan in plans:
        if not plan.keep.any():  # nothing of this file lies in the period
            read.append((plan.rel, None))
            continue
        if plan.path.name.lower().endswith(".parquet"):
            table = read_parquet_rows(plan)
        else:
            table = read_csv_rows(plan, log)
        frame = None
        if table is not None and len(table) and _first_is_timestamp(plan.names, plan.rel, log):
            positions = table.index.to_numpy()
            table = table.reset_index(drop=True)
            frame = _frame(table, plan.names, positions + 2, plan.times[positions],
                           quantities, plan.rel, log, marks)
        read.append((plan.rel, frame))
    return read


def _describe(period: Period) -> str:
    start, end = (f"{t:%Y-%m-%d %H:%M} UTC" if t is not None else None for t in period)
    return f"from {start or 'the start'} to {end or 'the end'}"


# ----------------------------------------------------------------------------- one file
def _read_file(
    path: Path, rel: str, quantities: pd.Series | None, timezone: str, log: ProblemLog,
    marks: Marks | None = None,
) -> pd.DataFrame | None:
    if path.name.lower().endswith(".parquet"):
        table = _read_parquet(path, rel, log)
    else:
        table = _read_csv(path, rel, log)
    if table is None:
        return None
    if table.shape[0] == 0:
        log.warning(rel, None, None, "the file has a header but no data rows")
        return None
    names = [str(c).strip() for c in table.columns]
    if not _first_is_timestamp(names, rel, log):
        return None
    rows = np.arange(2, table.shape[0] + 2)
    times = parse_times(table.iloc[:, 0], rows, timezone, file=rel, log=log)
    return _frame(table, names, rows, times, quantities, rel, log, marks)


def _first_is_timestamp(names: list[str], rel: str, log: ProblemLog) -> bool:
    if names[0].lower() != "timestamp":
        log.error(rel, 1, names[0], "the first column must be 'timestamp'")
        return False
    return True


def _frame(
    table: pd.DataFrame, names: list[str], rows: np.ndarray, times: pd.DatetimeIndex,
    quantities: pd.Series | None, rel: str, log: ProblemLog, marks: Marks | None = None,
) -> pd.DataFrame:
    """The checked values of ``table`` (a file's rows, spreadsheet ``rows``, UTC ``times``)
    as a time × tag frame in time order."""
    keep = _value_columns(table, names, quantities, rel, log)
    valid = np.asarray(times.notna())
    _report_rows_without_time(table, valid, rows, rel, log)
    tags = [names[p] for p in keep]
    values = _values(table, keep, tags, rows, valid, rel, log)
    apply_quality(table, names, keep, values, rows, valid, times, rel, log, marks)
    if quantities is not None:
        status = [j for j, t in enumerate(tags) if quantities.get(t) == STATUS_QUANTITY]
        _check_status(values, status, tags, rows, valid, rel, log)
        steps = [j for j, t in enumerate(tags) if quantities.get(t) == TAP_QUANTITY]
        _check_steps(values, steps, tags, rows, valid, rel, log)
    frame = pd.DataFrame(values[valid], index=times[valid], columns=pd.Index(tags, dtype=str))
    return _order(frame, rows[valid], rel, log)


def _report_rows_without_time(
    table: pd.DataFrame, valid: np.ndarray, rows: np.ndarray, rel: str, log: ProblemLog
) -> None:
    if valid.all():
        return
    stamp = table.iloc[:, 0]
    no_stamp = stamp.isna().to_numpy().copy()
    if not pd.api.types.is_datetime64_any_dtype(stamp.dtype):
        no_stamp |= stamp.astype(str).str.strip().eq("").to_numpy()
    filled = table.iloc[:, 1:].notna().any(axis=1).to_numpy()
    lost = no_stamp & filled & ~valid
    if lost.any():
        log.per_row(rel, rows[lost], "timestamp", "values without a time; row skipped")


#: How a NUL character of a snapshot file is shown (Unicode's symbol for null).
NUL_SHOWN = "\u2400"


def _read_csv(path: Path, rel: str, log: ProblemLog) -> pd.DataFrame | None:
    found = read_csv_text(path, rel, log)
    if found is None:
        return None
    text, dialect = found
    if "\x00" in text:
        # pandas' C parser ends a cell at a NUL byte (the cell would read as empty): shown as
        # a visible symbol, the cell is reported where it is (not a number, not a time).
        line = text.count("\n", 0, text.index("\x00")) + 1
        log.warning(rel, line, None, f"holds {text.count(chr(0))} NUL character(s) (byte 0), "
                    f"shown as {NUL_SHOWN}; a cell with one is not read as a value")
        text = text.replace("\x00", NUL_SHOWN)
    try:
        header = next(csv_records(text, dialect.sep))
    except csv.Error as exc:
        log.error(rel, 1, None, f"the header is not readable as CSV: {exc}")
        return None
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", pd.errors.ParserWarning)
            table = pd.read_csv(
                io.StringIO(text), sep=dialect.sep, decimal=dialect.decimal, header=None,
                skiprows=1, names=list(range(len(header))), dtype={0: str}, index_col=False,
                keep_default_na=False, na_values=[""], skip_blank_lines=False, low_memory=False,
            )
    except (pd.errors.ParserError, ValueError) as exc:
        found = re.search(r"line (\d+)", str(exc))
        log.error(
            rel, int(found.group(1)) if found else None, None,
            f"not readable as a table: {str(exc).split('C error: ')[-1].strip()}",
        )
        return None
    if any(issubclass(w.category, pd.errors.ParserWarning) for w in caught):
        log.per_row(
            rel, _rows_with_extra_values(text, dialect.sep, len(header)) or [2], None,
            f"more values than the {len(header)} columns named in the header",
            severity="error",
        )
        return None
    table.columns = header
    return table


def _rows_with_extra_values(text: str, sep: str, width: int) -> list[int]:
    rows = []
    try:
        for number, record in enumerate(csv_records(text, sep), start=1):
            if len(record) > width and any(cell.strip() for cell in record[width:]):
                rows.append(number)
    except csv.Error:
        pass  # the rows found so far (the caller falls back to row 2)
    return rows


def _read_parquet(path: Path, rel: str, log: ProblemLog) -> pd.DataFrame | None:
    try:  # through the file object: Arrow's dataset reader refuses repeated column names
        table = pq.ParquetFile(path).read(use_pandas_metadata=True).to_pandas()
    except Exception as exc:  # noqa: BLE001 - pyarrow raises many kinds; all mean "unreadable"
        first_line = (str(exc).strip().splitlines() or [type(exc).__name__])[0]
        log.error(rel, None, None, f"cannot read as Parquet: {first_line}")
        return None
    if isinstance(table.index, pd.DatetimeIndex) or table.index.name == "timestamp":
        table = table.reset_index()
    if table.shape[1] == 0:
        log.error(rel, None, None, "the file has no columns")
        return None
    return table


def _value_columns(
    table: pd.DataFrame, names: list[str], quantities: pd.Series | None, rel: str,
    log: ProblemLog,
) -> list[int]:
    """Positions of the columns to load: named, first of their name, and a point's tag."""
    keep, seen = [], {}
    for pos in range(1, len(names)):
        name = names[pos]
        if name == "":
            if table.iloc[:, pos].notna().any():
                log.warning(rel, 1, None, f"column {pos + 1} has values but no name; ignored")
        elif name in seen:
            log.error(rel, 1, name, f"column appears twice (columns {seen[name]} and {pos + 1})")
        elif is_quality_column(name):
            continue  # read by apply_quality
        elif quantities is not None and name not in quantities.index:
            seen[name] = pos + 1
            log.warning(rel, 1, name, "not a tag of the point list; column not loaded")
        else:
            seen[name] = pos + 1
            keep.append(pos)
    return keep


def _values(
    table: pd.DataFrame, keep: list[int], tags: list[str], rows: np.ndarray, valid: np.ndarray,
    rel: str, log: ProblemLog,
) -> np.ndarray:
    """The chosen columns as one float64 array; unusable cells become NaN and are counted
    (in the rows that have a usable time)."""
    values = np.empty((table.shape[0], len(keep)), dtype=np.float64)
    dtypes = table.dtypes.to_numpy()
    numeric = [
        j for j, pos in enumerate(keep)
        if pd.api.types.is_numeric_dtype(dtypes[pos]) or pd.api.types.is_bool_dtype(dtypes[pos])
    ]
    if numeric:
        block = table.iloc[:, [keep[j] for j in numeric]]
        values[:, numeric] = block.to_numpy(dtype=np.float64, na_value=np.nan)
    for j in sorted(set(range(len(keep))) - set(numeric)):
        column = table.iloc[:, keep[j]]
        text = column.astype(str).str.strip().where(column.notna(), "")
        number = pd.to_numeric(text, errors="coerce").to_numpy(dtype=np.float64)
        filled = text.ne("").to_numpy() & valid
        nan_word = text.str.lower().str.lstrip("+-").eq("nan").to_numpy()
        wrong = filled & np.isnan(number) & ~nan_word
        if wrong.any():
            first = np.flatnonzero(wrong)[0]
            _count(log, rel, int(rows[first]), tags[j], int(wrong.sum()),
                   f"'{text.iloc[first]}' is not a number")
        if (filled & nan_word).any():
            first = np.flatnonzero(filled & nan_word)[0]
            _count(log, rel, int(rows[first]), tags[j], int((filled & nan_word).sum()),
                   f"'{text.iloc[first]}' is not a finite number")
        values[:, j] = number
    infinite = np.isinf(values) & valid[:, None]
    for j in np.flatnonzero(infinite.any(axis=0)):
        where = np.flatnonzero(infinite[:, j])
        _count(log, rel, int(rows[where[0]]), tags[j], len(where),
               f"{values[where[0], j]:g} is not a finite number")
    values[np.isinf(values)] = np.nan
    return values


def _count(log: ProblemLog, rel: str, row: int, tag: str, n: int, what: str) -> None:
    more = f"; {n} cells of this column, the first in this row, are" if n > 1 else ";"
    log.warning(rel, row, tag, f"{what}{more} treated as missing", count=n)


def _check_status(
    values: np.ndarray, status: list[int], tags: list[str], rows: np.ndarray, valid: np.ndarray,
    rel: str, log: ProblemLog,
) -> None:
    """Status cells other than 0 or 1 become missing (counted per column)."""
    _refuse_cells(values, status, tags, rows, valid, rel, log,
                  lambda block: ~np.isnan(block) & (block != 0.0) & (block != 1.0),
                  "status {:g} is not 1 (closed) or 0 (open)")


def _check_steps(
    values: np.ndarray, steps: list[int], tags: list[str], rows: np.ndarray, valid: np.ndarray,
    rel: str, log: ProblemLog,
) -> None:
    """Tap-position cells that are not whole step numbers become missing (counted per
    column; the estimate then holds the last step received, see
    :mod:`calibra.estimation.tap_settings`)."""
    _refuse_cells(values, steps, tags, rows, valid, rel, log,
                  lambda block: ~np.isnan(block) & ~(np.isfinite(block)
                                                     & (block == np.round(block))),
                  "tap position {:g} is not a whole step number")


def _refuse_cells(values: np.ndarray, columns: list[int], tags: list[str], rows: np.ndarray,
                  valid: np.ndarray, rel: str, log: ProblemLog, bad_of, what: str) -> None:
    """Cells of ``columns`` that ``bad_of`` marks become missing, a warning per column
    naming the first (``what`` formats its value)."""
    if not columns:
        return
    block = values[:, columns]
    bad = bad_of(block)
    for k in np.flatnonzero((bad & valid[:, None]).any(axis=0)):
        where = np.flatnonzero(bad[:, k] & valid)
        _count(log, rel, int(rows[where[0]]), tags[columns[k]], len(where),
               what.format(block[where[0], k]))
    block[bad] = np.nan
    values[:, columns] = block


def _order(frame: pd.DataFrame, rows: np.ndarray, rel: str, log: ProblemLog) -> pd.DataFrame:
    """Rows in time order; a time repeated within the file keeps its first row."""
    stamps = frame.index.asi8
    backwards = np.flatnonzero(np.diff(stamps) < 0) + 1
    if len(backwards):
        log.warning(
            rel, int(rows[backwards[0]]), "timestamp",
            f"times go backwards {len(backwards)} times (first in this row); rows sorted by time",
            count=len(backwards),
        )
        order = np.argsort(stamps, kind="stable")
        frame, rows = frame.iloc[order], rows[order]
    repeated = frame.index.duplicated(keep="first")
    if repeated.any():
        log.per_row(
            rel, rows[repeated], "timestamp",
            "the same time as an earlier row; row skipped (the first row with this time is kept)",
        )
        frame = frame[~repeated]
    return frame
