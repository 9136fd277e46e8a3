"""CSV cells a spreadsheet cannot execute.

A spreadsheet treats a cell that starts with ``=``, ``+``, ``-`` or ``@`` (or with a tab,
carriage return or line feed before one) as a formula, so a hostile tag or note could run
code when the crew opens the file ("CSV injection"; OWASP lists these characters [M]).
Rules here:

- numbers (int, float, numpy numbers) are written as numbers; a negative number stays
  ``-4.2``, which a spreadsheet reads as a number, not a formula;
- text that is exactly a plain decimal number (``-4.2``, ``+3``, ``1e-3``) is left as it is,
  for the same reason;
- any other text whose first character (ignoring leading spaces) is one of ``= + - @``, a tab,
  CR or LF, or their full-width forms, gets a leading single quote, which spreadsheets show as
  text and do not evaluate;
- empty values (None, NaN) become empty cells.
"""

from __future__ import annotations

import csv
import math
import numbers
import re
from collections.abc import Iterable, Sequence
from pathlib import Path

import pandas as pd

_TRIGGERS = ("=", "+", "-", "@", "\t", "\r", "\n", "\uff1d", "\uff0b", "\uff0d", "\uff20")
_PLAIN_NUMBER = re.compile(r"[+-]?(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?")


def spreadsheet_cell(value) -> str | int | float:
    """``value`` as a CSV cell that no spreadsheet will evaluate as a formula."""
    if value is None or value is pd.NA or value is pd.NaT:
        return ""
    if isinstance(value, bool):
        return str(value).lower()
    if isinstance(value, numbers.Integral):
        return int(value)
    if isinstance(value, numbers.Real):
        value = float(value)
        if math.isnan(value):
            return ""
        if math.isfinite(value):
            return value
        return "'-inf" if value < 0 else "inf"
    text = str(value)
    if _PLAIN_NUMBER.fullmatch(text):
        return text
    stripped = text.lstrip(" ")
    if text.startswith(("\t", "\r", "\n")) or stripped.startswith(_TRIGGERS):
        return "'" + text
    return text


def write_safe_csv(path: str | Path, columns: Sequence[str], rows: Iterable[Sequence]) -> Path:
    """Write a CSV (UTF-8 with a byte-order mark, which spreadsheets need to read accents)."""
    path = Path(path)
    with path.open("w", newline="", encoding="utf-8-sig") as handle:
        writer = csv.writer(handle)
        writer.writerow([spreadsheet_cell(c) for c in columns])
        for row in rows:
            writer.writerow([spreadsheet_cell(v) for v in row])
    return path
