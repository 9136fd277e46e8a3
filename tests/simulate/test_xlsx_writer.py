"""The small xlsx writer of the sample exports, read back by two independent readers
(python-calamine, the reader calibra uses, and openpyxl, test only)."""

import openpyxl
import pytest
from python_calamine import CalamineWorkbook

from calibra.simulate.xlsx_writer import write_xlsx

SHEETS = {
    "Cover & notes": [["Tarrowmere <telemetry>"], [], ["issue", 3]],
    "Points": [["SCADA point", "Span", "CT ratio", "Remarks"],
               ["VSM.220.EBB1.MW", 191, "500/5", None],
               ["VSM.220.BB1.KV", 245.5, None, " leading space"],
               ["\"quoted\" & 'apostrophe'", -0.125, "1200/5", "Ørsvik ÆØÅ"]],
}


def test_two_readers_read_what_was_written(tmp_path):
    path = tmp_path / "book.xlsx"
    write_xlsx(path, SHEETS)
    book = openpyxl.load_workbook(path)
    assert book.sheetnames == list(SHEETS)
    for name, rows in SHEETS.items():
        got = [list(r) for r in book[name].iter_rows(values_only=True)]
        width = max(len(r) for r in rows)
        want = [list(r) + [None] * (width - len(r)) for r in rows]
        assert got == [[None if c == "" else c for c in r] for r in want]
    calamine = CalamineWorkbook.from_path(str(path))
    assert calamine.sheet_names == list(SHEETS)
    points = calamine.get_sheet_by_name("Points").to_python()
    assert points[1] == ["VSM.220.EBB1.MW", 191.0, "500/5", ""]
    assert points[3][0] == "\"quoted\" & 'apostrophe'" and points[3][3] == "Ørsvik ÆØÅ"


def test_what_cannot_be_written(tmp_path):
    with pytest.raises(ValueError, match="at least one sheet"):
        write_xlsx(tmp_path / "x.xlsx", {})
    with pytest.raises(ValueError, match="not a finite number"):
        write_xlsx(tmp_path / "x.xlsx", {"a": [[float("nan")]]})
    with pytest.raises(TypeError):
        write_xlsx(tmp_path / "x.xlsx", {"a": [[True]]})
