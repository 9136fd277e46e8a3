"""The point list's stated deadband and resolution (``deadband``, ``resolution``): read from
their cells, and checked against the snapshots once both are loaded.

A cell holds a number in the point's unit (``0.5``, ``0.5 kV``) or a percentage of the
point's full scale (``0.3%``, ``0.3 % FS``); an empty cell leaves the value to be inferred
from the data (NaN). Values are non-negative and finite; 0 states "none" (every change
stored; a reading of full resolution).
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

from calibra.io.problems import ProblemLog
from calibra.io.text_files import RawTable
from calibra.model.points import (
    REPORTING_COLUMNS,
    REPORTING_WARN_PCT,
    SETTING_QUANTITIES,
    UNIT_SPELLINGS,
)
from calibra.model.reporting import reporting_disagreements

_NUMBER = r"[+-]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][+-]?\d+)?"
#: ``<number>`` with an optional unit word, or ``<number> %`` with an optional "FS" / "of full
#: scale" after it.
_CELL = re.compile(rf"^({_NUMBER})\s*(?:(%)\s*(?:fs|of\s+full\s+scale)?|([A-Za-z]+))?$",
                   re.IGNORECASE)
_EXAMPLE = "a number in the point's unit or a percentage of full scale such as 0.3%"


def _read(text: str, decimal: str, unit: str, full_scale: float) -> tuple[float, str | None]:
    """The value of one non-empty cell in the point's unit, and the problem (None if none)."""
    if text.lower().lstrip("+-") in ("inf", "infinity", "nan"):
        return np.nan, f"'{text}' is not a finite number"
    match = _CELL.match(text)
    if match is None:
        return np.nan, f"'{text}' is not {_EXAMPLE}"
    number, percent, word = match.groups()
    if "," in number:
        if decimal != ",":
            return np.nan, f"'{text}' is not {_EXAMPLE}"
        number = number.replace(",", ".")
    try:
        value = float(number)
    except ValueError:
        return np.nan, f"'{text}' is not {_EXAMPLE}"
    if not np.isfinite(value):
        return np.nan, f"'{text}' is not a finite number"
    if value < 0:
        return np.nan, f"must not be negative, not {text}"
    if word is not None:
        canon = UNIT_SPELLINGS.get(word.lower())
        if canon is None:
            return np.nan, f"'{text}' is not {_EXAMPLE}"
        if unit and canon != unit:
            return np.nan, f"'{text}' is in {canon}, but the point's unit is {unit}"
    if percent:
        if not np.isfinite(full_scale):
            return np.nan, (f"'{text}' is a percentage of full scale, but the point has no "
                            "valid full_scale (give one, or write the value in the point's "
                            "unit)")
        value = value / 100.0 * full_scale
    return value, None


def reporting_cells(t: RawTable, column: str, quantity: np.ndarray, unit: np.ndarray,
                    full_scale: np.ndarray, log: ProblemLog) -> np.ndarray:
    """``deadband`` or ``resolution`` of every record in the point's unit (NaN: empty or bad,
    inferred from the data). Bad cells are errors; a value for a ``branch_status`` point is a
    warning (not used: a status has no deadband); one above :data:`REPORTING_WARN_PCT` % of
    full scale is a warning (kept)."""
    out = np.full(len(t.rows), np.nan)
    if not t.has(column):
        return out
    for i, text in enumerate(t.cells(column)):
        if text == "":
            continue
        row = int(t.rows[i])
        if quantity[i] in SETTING_QUANTITIES:
            log.warning(t.file, row, column,
                        f"'{text}' is not used: a {quantity[i]} point has no {column}")
            continue
        value, problem = _read(text, t.dialect.decimal, str(unit[i]), float(full_scale[i]))
        if problem is not None:
            log.error(t.file, row, column, problem)
            continue
        out[i] = value
        pct = 100.0 * value / full_scale[i] if full_scale[i] > 0 else np.nan
        if pct > REPORTING_WARN_PCT:
            log.warning(t.file, row, column,
                        f"{value:.4g} {unit[i]} is {pct:.3g} % of full scale, more than "
                        f"{REPORTING_WARN_PCT:g} %: unusually large, check it (the value is "
                        "used as given)")
    return out


def report_reporting_disagreements(points: pd.DataFrame, rows: pd.Series,
                                   snapshots: pd.DataFrame, log: ProblemLog) -> None:
    """A warning at the point-list cell of every stated deadband or resolution that the
    point's snapshots contradict (see :func:`calibra.model.reporting.reporting_disagreements`).
    The stated value is still used: the warning asks the engineer to check it."""
    stated = [c for c in REPORTING_COLUMNS if c in points]
    if not stated:
        return
    given = points[stated].notna().any(axis=1) & points.index.isin(snapshots.columns)
    file = rows.attrs.get("file", "points.csv")
    labels = rows.attrs.get("labels", {})
    for tag in points.index[given.to_numpy()]:
        pt = points.loc[tag]
        values = {c: (None if pd.isna(pt.get(c)) else float(pt[c])) for c in REPORTING_COLUMNS}
        found = reporting_disagreements(snapshots[tag].to_numpy(float), values["deadband"],
                                        values["resolution"], str(pt["unit"]))
        for d in found:
            log.warning(file, int(rows.get(tag, 0)) or None, labels.get(d.column, d.column),
                        f"the snapshots disagree with the stated {d.column}: {d.why}; the "
                        "stated value is used, check the point list")
