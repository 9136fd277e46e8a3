"""Reading one sheet of a spreadsheet (``.xlsx``, ``.xlsm``, ``.ods``, the older binary
``.xls``) as text cells.

python-calamine reads the values the file stores (a formula's last computed value, not its
text). Each cell becomes the text a CSV export would hold: an integer-valued number without
its ``.0`` (1200.0 → ``1200``), other numbers in their shortest round-trip form, dates and
times in ISO 8601, true/false, empty cells ``""``. Rows keep the numbers the sheet shows.
The header is the first row with two or more values: rows above it (empty, or one title
cell) are not part of the table. A header of one cell could name no usable table, so the rule
is unambiguous.
"""

from __future__ import annotations

import datetime as dt
import math
from dataclasses import dataclass
from pathlib import Path

from python_calamine import CalamineWorkbook

from calibra.io.problems import ProblemLog

SPREADSHEET_SUFFIXES = (".xlsx", ".xlsm", ".ods", ".xls")
#: Integers a float carries exactly (2**53): larger integer-valued floats keep their exponent.
_EXACT_INTEGERS = 2.0 ** 53


@dataclass(frozen=True)
class Sheet:
    """A sheet's text: ``file`` as problems name it (``points.xlsx [Sheet1]``), the header's
    row, its cells, the records after it as (row, cells), and the column letters."""

    file: str
    header_row: int
    header: list[str]
    body: list[tuple[int, list[str]]]
    letters: list[str]


def column_letter(index: int) -> str:
    """The spreadsheet letter of a 0-based column: 0 → A, 25 → Z, 26 → AA."""
    letters = ""
    index += 1
    while index:
        index, rest = divmod(index - 1, 26)
        letters = chr(ord("A") + rest) + letters
    return letters


def cell_text(value: object) -> str:
    """The text of one cell as a CSV export would write it (see the module docstring)."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isfinite(value) and value.is_integer() and abs(value) < _EXACT_INTEGERS:
            return str(int(value))
        return repr(value)
    if isinstance(value, dt.datetime | dt.date | dt.time):
        return value.isoformat()
    if isinstance(value, dt.timedelta):
        return f"PT{value.total_seconds():g}S"
    return str(value).strip()


def read_sheet(
    path: Path, rel: str, sheet: str | None, log: ProblemLog,
    where_sheet: tuple[str, int | None, str] | None = None,
) -> Sheet | None:
    """The named sheet of a spreadsheet (the first when ``sheet`` is None) as text; None with
    an error logged when the file cannot be read, has no such sheet or the sheet is empty.
    ``where_sheet`` (file, line, key) locates the setting that named the sheet."""
    try:
        book = CalamineWorkbook.from_path(str(path))
        names = list(book.sheet_names)
        if not names:
            log.error(rel, None, None, "the workbook has no sheet")
            return None
        name = names[0] if sheet is None else sheet
        if name not in names:
            file, line, key = where_sheet or (rel, None, None)
            log.error(file, line, key, f"{rel} has no sheet '{name}' (its sheets: "
                      + ", ".join(f"'{n}'" for n in names) + ")")
            return None
        values = book.get_sheet_by_name(name).to_python(skip_empty_area=False)
    except Exception as exc:  # noqa: BLE001 — calamine raises its own errors (zip, XML,
        # password, format) from Rust; each means the file cannot be read, never a bug here
        log.error(rel, None, None, f"cannot read the spreadsheet: {type(exc).__name__}: {exc}")
        return None
    file = f"{rel} [{name}]"
    rows = [[cell_text(v) for v in row] for row in values]
    first = _header_index(rows)
    if first is None:
        log.error(file, None, None, "the sheet is empty")
        return None
    header = rows[first]
    width = max(len(r) for r in rows)
    body = [(i + 1, row) for i, row in enumerate(rows) if i > first]
    return Sheet(file, first + 1, header, body, [column_letter(i) for i in range(width)])


def _header_index(rows: list[list[str]]) -> int | None:
    """The 0-based row of the header: the first with two or more values, else the first with
    any (None for an empty sheet)."""
    filled = [sum(1 for c in row if c) for row in rows]
    for wanted in (2, 1):
        found = next((i for i, n in enumerate(filled) if n >= wanted), None)
        if found is not None:
            return found
    return None
