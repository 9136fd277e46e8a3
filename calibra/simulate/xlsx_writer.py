"""A small writer of Office Open XML workbooks (``.xlsx``) for the sample exports.

calibra reads spreadsheets (python-calamine) but never writes them, and openpyxl is only a
test dependency; the sample point list needs nothing but text and numbers in a few sheets, so
it is written here with the standard library: the package parts of ECMA-376 Part 1
(SpreadsheetML: workbook, worksheets with inline strings, relationships, content types), as
remembered from the standard and checked in the tests by reading the file back with
python-calamine and openpyxl.
"""

from __future__ import annotations

import math
import zipfile
from collections.abc import Sequence
from pathlib import Path
from xml.sax.saxutils import escape

from calibra.io.spreadsheet import column_letter

Cell = str | int | float | None
_MAIN = "http://schemas.openxmlformats.org/spreadsheetml/2006/main"
_REL = "http://schemas.openxmlformats.org/officeDocument/2006/relationships"
_PKG_REL = "http://schemas.openxmlformats.org/package/2006/relationships"
_TYPES = "http://schemas.openxmlformats.org/package/2006/content-types"
_SHEET_TYPE = "application/vnd.openxmlformats-officedocument.spreadsheetml.worksheet+xml"
_BOOK_TYPE = "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet.main+xml"
_HEAD = '<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n'


def _cell(ref: str, value: Cell) -> str:
    if value is None or value == "":
        return ""
    if isinstance(value, bool):
        raise TypeError("booleans are not written; give 'true'/'false' as text")
    if isinstance(value, int | float):
        if not math.isfinite(value):
            raise ValueError(f"cell {ref}: {value} is not a finite number")
        return f'<c r="{ref}"><v>{value!r}</v></c>'
    text = escape(str(value))
    space = ' xml:space="preserve"' if text != text.strip() else ""
    return f'<c r="{ref}" t="inlineStr"><is><t{space}>{text}</t></is></c>'


def _sheet(rows: Sequence[Sequence[Cell]]) -> str:
    body = []
    for r, row in enumerate(rows, start=1):
        cells = "".join(_cell(f"{column_letter(c)}{r}", v) for c, v in enumerate(row))
        body.append(f'<row r="{r}">{cells}</row>')
    return f'{_HEAD}<worksheet xmlns="{_MAIN}"><sheetData>{"".join(body)}</sheetData></worksheet>'


def write_xlsx(path: Path, sheets: dict[str, Sequence[Sequence[Cell]]]) -> None:
    """Write ``sheets`` (name → rows of cells: text, numbers or None) to ``path``."""
    if not sheets:
        raise ValueError("a workbook needs at least one sheet")
    names = list(sheets)
    types = "".join(f'<Override PartName="/xl/worksheets/sheet{k}.xml" '
                    f'ContentType="{_SHEET_TYPE}"/>' for k in range(1, len(names) + 1))
    content_types = (
        f'{_HEAD}<Types xmlns="{_TYPES}">'
        '<Default Extension="rels" ContentType="application/vnd.openxmlformats-package.'
        'relationships+xml"/><Default Extension="xml" ContentType="application/xml"/>'
        f'<Override PartName="/xl/workbook.xml" ContentType="{_BOOK_TYPE}"/>{types}</Types>')
    root_rels = (f'{_HEAD}<Relationships xmlns="{_PKG_REL}"><Relationship Id="rId1" '
                 f'Type="{_REL}/officeDocument" Target="xl/workbook.xml"/></Relationships>')
    entries = "".join(f'<sheet name="{escape(n, {chr(34): "&quot;"})}" sheetId="{k}" '
                      f'r:id="rId{k}"/>' for k, n in enumerate(names, start=1))
    workbook = (f'{_HEAD}<workbook xmlns="{_MAIN}" xmlns:r="{_REL}"><sheets>{entries}</sheets>'
                '</workbook>')
    book_rels = "".join(f'<Relationship Id="rId{k}" Type="{_REL}/worksheet" '
                        f'Target="worksheets/sheet{k}.xml"/>' for k in range(1, len(names) + 1))
    with zipfile.ZipFile(path, "w", compression=zipfile.ZIP_DEFLATED) as book:
        book.writestr("[Content_Types].xml", content_types)
        book.writestr("_rels/.rels", root_rels)
        book.writestr("xl/workbook.xml", workbook)
        book.writestr("xl/_rels/workbook.xml.rels",
                      f'{_HEAD}<Relationships xmlns="{_PKG_REL}">{book_rels}</Relationships>')
        for k, name in enumerate(names, start=1):
            book.writestr(f"xl/worksheets/sheet{k}.xml", _sheet(sheets[name]))
