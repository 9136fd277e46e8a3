"""Checking and converting the cells of a small table column by column (vectorised).

Each function returns a Series aligned with the table's records and logs one error per bad
cell, located by the table's file, the record's spreadsheet row and the column name. A column
that is missing from the file (already reported by the header check) gives the default.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import pandas as pd

from calibra.io.problems import ProblemLog
from calibra.io.text_files import RawTable

TRUE_WORDS = ("true", "yes", "1")
FALSE_WORDS = ("false", "no", "0")


def _report(t: RawTable, column: str, mask, messages, log: ProblemLog) -> None:
    """Log an error for each record where ``mask`` holds; ``messages`` is a str or a Series."""
    for i in np.flatnonzero(np.asarray(mask, dtype=bool)):
        text = messages if isinstance(messages, str) else messages.iloc[i]
        log.error(t.file, int(t.rows[i]), column, text)


def _cells(t: RawTable, column: str) -> pd.Series | None:
    return t.data[column] if column in t.data.columns else None


def text_cells(t: RawTable, column: str, log: ProblemLog, *, required: bool) -> pd.Series:
    """Stripped text; an empty cell is an error when ``required``."""
    s = _cells(t, column)
    if s is None:
        return pd.Series([""] * len(t.rows), dtype=str)
    if required:
        _report(t, column, s.eq(""), "empty; a value is required", log)
    return s.astype(str)


def id_cells(t: RawTable, column: str, log: ProblemLog, what: str) -> pd.Series:
    """Identifiers: required, and unique within the table (later duplicates are errors)."""
    s = text_cells(t, column, log, required=True)
    dup = s.duplicated(keep="first") & s.ne("")
    if dup.any():
        first_row = pd.Series(t.rows, index=s.index).groupby(s).transform("first")
        msgs = f"duplicate {what} '" + s + "' (first at row " + first_row.astype(str) + ")"
        _report(t, column, dup, msgs, log)
    return s


def number_cells(
    t: RawTable,
    column: str,
    log: ProblemLog,
    *,
    required: bool = True,
    default: float = np.nan,
    positive: bool = False,
) -> pd.Series:
    """Finite floats. Empty cells are errors when ``required``, else ``default``;
    text, NaN and infinity are errors; ``positive`` demands values greater than zero."""
    s = _cells(t, column)
    if s is None:
        return pd.Series(np.full(len(t.rows), default, dtype=float))
    text = s.str.replace(",", ".", regex=False) if t.dialect.decimal == "," else s
    num = pd.to_numeric(text, errors="coerce").astype(float)
    empty = s.eq("")
    not_number = ~empty & num.isna() & ~s.str.lower().str.lstrip("+-").eq("nan")
    not_finite = ~empty & ~not_number & ~np.isfinite(num)
    _report(t, column, not_number, "'" + s + "' is not a number", log)
    _report(t, column, not_finite, "'" + s + "' is not a finite number", log)
    if required:
        _report(t, column, empty, "empty; a number is required", log)
    if positive:
        bad = np.isfinite(num) & (num <= 0)
        _report(t, column, bad, "must be greater than zero, not " + s, log)
    num = num.where(np.isfinite(num), np.nan)
    return num.where(~empty, default)


def bool_cells(t: RawTable, column: str, log: ProblemLog, *, default: bool | None) -> pd.Series:
    """true/false, yes/no, 1/0 (any case). Empty cells give ``default``; when that is None
    an empty cell is an error."""
    s = _cells(t, column)
    if s is None:
        return pd.Series(np.full(len(t.rows), bool(default)), dtype=bool)
    low = s.str.lower()
    is_true = low.isin(TRUE_WORDS)
    empty = s.eq("")
    bad = ~empty & ~is_true & ~low.isin(FALSE_WORDS)
    _report(t, column, bad, "'" + s + "' is not true/false (also accepted: yes/no, 1/0)", log)
    if default is None:
        _report(t, column, empty, "empty; true or false is required", log)
    return (is_true | (empty & bool(default))).astype(bool)


def choice_cells(
    t: RawTable,
    column: str,
    choices: Mapping[str, str],
    log: ProblemLog,
    *,
    required: bool,
    what: str,
) -> pd.Series:
    """One of ``choices`` (keys lower-case, values the canonical spelling), any case.
    Unknown words are errors and give ""."""
    s = _cells(t, column)
    if s is None:
        return pd.Series([""] * len(t.rows), dtype=str)
    canon = s.str.lower().map(dict(choices))
    empty = s.eq("")
    bad = ~empty & canon.isna()
    listing = ", ".join(dict.fromkeys(choices.values()))
    _report(t, column, bad, "'" + s + f"' is not a {what} (one of {listing})", log)
    if required:
        _report(t, column, empty, f"empty; a {what} is required ({listing})", log)
    return canon.fillna("").astype(str)
