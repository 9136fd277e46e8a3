"""Checking and converting the cells of a small table column by column.

Each function returns a numpy array aligned with the table's records (text as ``object``
arrays of ``str``) and logs one error per bad cell, located by the table's file, the record's
spreadsheet row and the column name. A column that is missing from the file (already reported
by the header check) gives the default. The work is done on numpy arrays of text: these
tables are small, and per-call pandas string overhead would dominate.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping

import numpy as np
import pandas as pd

from calibra.io.problems import ProblemLog
from calibra.io.text_files import RawTable

TRUE_WORDS = ("true", "yes", "1")
FALSE_WORDS = ("false", "no", "0")

#: A fixed message, or a function of the bad cell's text (called only for bad cells).
Message = str | Callable[[str], str]


def _report(t: RawTable, column: str, mask: np.ndarray, message: Message, log: ProblemLog) -> None:
    """Log an error for each record where ``mask`` holds."""
    cells = t.cells(column)
    for i in np.flatnonzero(mask):
        text = message if isinstance(message, str) else message(cells[i])
        log.error(t.file, int(t.rows[i]), column, text)


def _words(cells: np.ndarray) -> np.ndarray:
    return np.array([c.lower() for c in cells], dtype=object)


def text_cells(t: RawTable, column: str, log: ProblemLog, *, required: bool) -> np.ndarray:
    """Stripped text; an empty cell is an error when ``required``."""
    cells = t.cells(column)
    if required and t.has(column):
        _report(t, column, cells == "", "empty; a value is required", log)
    return cells


def first_occurrences(ids: np.ndarray) -> np.ndarray:
    """True at the first record of each non-empty id (the records a table keeps)."""
    seen: set[str] = set()
    keep = np.zeros(len(ids), dtype=bool)
    for i, value in enumerate(ids):
        if value and value not in seen:
            seen.add(value)
            keep[i] = True
    return keep


def id_cells(t: RawTable, column: str, log: ProblemLog, what: str) -> np.ndarray:
    """Identifiers: required, and unique within the table (later duplicates are errors)."""
    ids = text_cells(t, column, log, required=True)
    first_row: dict[str, int] = {}
    duplicate = np.zeros(len(t.rows), dtype=bool)
    for i, value in enumerate(t.cells(column)):
        if value == "":
            continue
        if value in first_row:
            duplicate[i] = True
        else:
            first_row[value] = int(t.rows[i])
    _report(t, column, duplicate,
            lambda v: f"duplicate {what} '{v}' (first at row {first_row[v]})", log)
    return ids


def _parse_numbers(cells: np.ndarray, decimal: str) -> np.ndarray:
    """Floats of the cells (NaN where a cell is not a number; 'nan' text gives NaN too)."""
    text = cells if decimal == "." else np.array([c.replace(",", ".") for c in cells],
                                                 dtype=object)
    return pd.to_numeric(text, errors="coerce").astype(float)


def number_cells(
    t: RawTable,
    column: str,
    log: ProblemLog,
    *,
    required: bool = True,
    default: float = np.nan,
    positive: bool = False,
) -> np.ndarray:
    """Finite floats. Empty cells are errors when ``required``, else ``default``;
    text, NaN and infinity are errors; ``positive`` demands values greater than zero."""
    if not t.has(column):
        return np.full(len(t.rows), default, dtype=float)
    cells = t.cells(column)
    num = np.asarray(_parse_numbers(cells, t.dialect.decimal), dtype=float)
    empty = cells == ""
    nan_word = np.array([c.lower().lstrip("+-") == "nan" for c in cells], dtype=bool)
    not_number = ~empty & np.isnan(num) & ~nan_word
    not_finite = ~empty & ~not_number & ~np.isfinite(num)
    _report(t, column, not_number, lambda v: f"'{v}' is not a number", log)
    _report(t, column, not_finite, lambda v: f"'{v}' is not a finite number", log)
    if required:
        _report(t, column, empty, "empty; a number is required", log)
    if positive:
        bad = np.isfinite(num) & (num <= 0)
        _report(t, column, bad, lambda v: f"must be greater than zero, not {v}", log)
    num = np.where(np.isfinite(num), num, np.nan)
    return np.where(empty, default, num).astype(float)


def bool_cells(t: RawTable, column: str, log: ProblemLog, *, default: bool | None) -> np.ndarray:
    """true/false, yes/no, 1/0 (any case). Empty cells give ``default``; when that is None
    an empty cell is an error."""
    if not t.has(column):
        return np.full(len(t.rows), bool(default), dtype=bool)
    cells = t.cells(column)
    low = _words(cells)
    is_true = np.isin(low, TRUE_WORDS)
    empty = cells == ""
    bad = ~empty & ~is_true & ~np.isin(low, FALSE_WORDS)
    _report(t, column, bad,
            lambda v: f"'{v}' is not true/false (also accepted: yes/no, 1/0)", log)
    if default is None:
        _report(t, column, empty, "empty; true or false is required", log)
    return is_true | (empty & bool(default))


def choice_cells(
    t: RawTable,
    column: str,
    choices: Mapping[str, str],
    log: ProblemLog,
    *,
    required: bool,
    what: str,
) -> np.ndarray:
    """One of ``choices`` (keys lower-case, values the canonical spelling), any case.
    Unknown words are errors and give ""."""
    if not t.has(column):
        return np.full(len(t.rows), "", dtype=object)
    cells = t.cells(column)
    canon = np.array([choices.get(c.lower(), "") for c in cells], dtype=object)
    empty = cells == ""
    bad = ~empty & (canon == "")
    listing = ", ".join(dict.fromkeys(choices.values()))
    _report(t, column, bad, lambda v: f"'{v}' is not a {what} (one of {listing})", log)
    if required:
        _report(t, column, empty, f"empty; a {what} is required ({listing})", log)
    return canon
