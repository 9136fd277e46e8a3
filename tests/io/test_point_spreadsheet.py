"""Spreadsheet point lists (points.xlsx, points.ods), header aliases and [points] in site.toml.

The spreadsheets are written here by independent implementations of the formats: openpyxl
for Office Open XML workbooks (ECMA-376), odfpy, through pandas' ``odf`` writer, for
OpenDocument spreadsheets (OASIS ODF 1.2) and xlwt for the older binary Excel workbooks
(BIFF8, .xls); calibra reads them with python-calamine.
"""

from __future__ import annotations

import datetime as dt
import itertools
from pathlib import Path

import openpyxl
import pandas as pd
import pytest
import xlwt
from openpyxl.utils import get_column_letter

from calibra.io import load_site
from calibra.io.spreadsheet import cell_text, column_letter
from calibra.model.points import canonical_ratio
from calibra.review_run import FINDINGS_FILE, run_review, write_outputs
from tests.io.site_builder import SITE_TOML, SiteFiles, find, problems_of

SAMPLE = Path(__file__).resolve().parents[2] / "sample_site"

#: The sample point list's headers as a utility's sheet might name them (aliases), and one
#: odd header ("SCADA device") that only the [points.columns] mapping explains.
RENAMED = {
    "tag": "Point name", "quantity": "Measurement", "element": "Branch/Bus",
    "unit": "Units", "full_scale": "Full scale", "accuracy_pct": "Accuracy %",
    "ct_ratio": "CT ratio", "vt_ratio": "PT ratio", "note": "Remarks",
    "device": "SCADA device",
}
MAPPING = '\n[points]\nsheet = "Analog points"\n\n[points.columns]\ndevice = "SCADA device"\n'
#: Usual spellings of each unit (common practice, no source).
SPELLINGS = {"MW": ["MW", "mw", "Mw"], "Mvar": ["MVAr", "MVAR", "Mvar", "mvar"],
             "kV": ["kV", "KV", "kv"], "A": ["A", "amps", "Amp"], "status": ["status"]}


def as_cell(text: str) -> object:
    """A CSV cell as a spreadsheet holds it: numbers as numbers, empty as no value."""
    if text == "":
        return None
    for kind in (int, float):
        try:
            return kind(text)
        except ValueError:
            pass
    return text


def write_xlsx(path: Path, header: list[str], rows: list[list[str]], sheet: str = "Sheet1",
               before: list[list[object]] = (), first_sheet: str | None = None) -> Path:
    """A workbook (openpyxl) with ``rows`` under ``header`` on ``sheet``; ``before``: rows
    above the header; ``first_sheet``: another sheet placed first."""
    book = openpyxl.Workbook()
    ws = book.active
    if first_sheet is not None:
        ws.title = first_sheet
        ws.append(["Point list of the Tarrowmere grid"])
        ws = book.create_sheet(sheet)
    else:
        ws.title = sheet
    for row in before:
        ws.append(list(row))
    ws.append(header)
    for row in rows:
        ws.append([as_cell(c) for c in row])
    book.save(path)
    return path


def write_ods(path: Path, header: list[str], rows: list[list[str]], sheet: str) -> Path:
    """An OpenDocument spreadsheet written by odfpy through pandas."""
    frame = pd.DataFrame([[as_cell(c) for c in row] for row in rows], columns=header,
                         dtype=object)
    frame.to_excel(path, sheet_name=sheet, index=False, engine="odf")
    return path


def write_xls(path: Path, header: list[str], rows: list[list[str]], sheet: str) -> Path:
    """A binary Excel workbook (BIFF8) written by xlwt: numbers stored as numbers."""
    book = xlwt.Workbook()
    page = book.add_sheet(sheet)
    for r, row in enumerate([header, *rows]):
        for c, cell in enumerate(row):
            value = as_cell(cell) if r else cell
            if value is not None:
                page.write(r, c, value)
    book.save(str(path))
    return path


def sample_as_spreadsheet(root: Path) -> Path:
    """The sample site with its points.csv turned into points.xlsx: aliased headers, one
    mapped header, units spelled in turn, CT ratios written 500:5, 500/5, 500-5, 500 / 5."""
    root.mkdir()
    for name in ("network", "snapshots"):
        (root / name).symlink_to(SAMPLE / name)
    (root / "site.toml").write_text((SAMPLE / "site.toml").read_text() + MAPPING)
    table = pd.read_csv(SAMPLE / "points.csv", dtype=str, keep_default_na=False)
    spell = {unit: itertools.cycle(words) for unit, words in SPELLINGS.items()}
    table["unit"] = [next(spell[u]) for u in table["unit"]]
    separators = itertools.cycle([":", "/", "-", " / "])
    table["ct_ratio"] = [r.replace(":", next(separators)) if r else r for r in table["ct_ratio"]]
    header = [RENAMED.get(c, c) for c in table.columns]
    write_xlsx(root / "points.xlsx", header, table.to_numpy().tolist(),
               sheet="Analog points", first_sheet="Cover")
    return root


def test_sample_point_list_as_xlsx_loads_to_the_same_table(tmp_path):
    xlsx = load_site(sample_as_spreadsheet(tmp_path / "site"), require_snapshots=False)
    csv = load_site(SAMPLE, require_snapshots=False)
    assert xlsx.problems == csv.problems == []
    pd.testing.assert_frame_equal(xlsx.points, csv.points)
    pd.testing.assert_frame_equal(xlsx.snapshots, csv.snapshots)


def test_sample_review_from_xlsx_gives_the_csv_folders_findings(tmp_path):
    out = {}
    for name, folder in (("csv", SAMPLE), ("xlsx", sample_as_spreadsheet(tmp_path / "site"))):
        site = load_site(folder)
        out[name] = write_outputs(run_review(site), site, tmp_path / name)["findings"]
    assert out["csv"].name == FINDINGS_FILE
    assert out["xlsx"].read_bytes() == out["csv"].read_bytes()


def small_site(tmp_path: Path, files: SiteFiles | None = None) -> tuple[Path, SiteFiles]:
    """The invented Fenwick Hollow site without its points.csv (written by the test)."""
    files = files or SiteFiles()
    root = files.write(tmp_path / "site")
    (root / "points.csv").unlink()
    return root, files


def test_bad_cells_name_file_sheet_row_and_column(tmp_path):
    root, files = small_site(tmp_path)
    files.points.set(3, "full_scale", "two hundred").set(5, "unit", "furlongs")
    header = [RENAMED.get(c, c) for c in files.points.header]
    (root / "site.toml").write_text(SITE_TOML + '[points.columns]\ndevice = "SCADA device"\n')
    # A title and an empty row above the header: the sheet's own row numbers are kept.
    write_xlsx(root / "points.xlsx", header, files.points.rows, sheet="Sheet1",
               before=[["Fenwick Hollow point list"], []])
    problems = problems_of(root)
    file = "points.xlsx [Sheet1]"
    # Header in sheet row 3, so points.csv's row 3 is sheet row 5 (column F: full_scale).
    scale = find(problems, file, 5, "Full scale (F)")
    assert scale.message == "'two hundred' is not a number"
    unit = find(problems, file, 7, "Units (E)")
    assert unit.message.startswith("'furlongs' is not a unit")
    # The title row is above the table, not a problem (the unit cell is the only other one).
    assert {(p.row, p.column) for p in problems} == {(5, "Full scale (F)"), (7, "Units (E)")}


def test_ods_point_list_loads_like_the_csv(tmp_path, files):
    csv = load_site(files.write(tmp_path / "csv")).points
    root, files = small_site(tmp_path, files)
    write_ods(root / "points.ods", files.points.header, files.points.rows, "Telemetry")
    pd.testing.assert_frame_equal(load_site(root).points, csv)


def test_xls_point_list_loads_like_the_csv(tmp_path, files):
    csv = load_site(files.write(tmp_path / "csv")).points
    root, files = small_site(tmp_path, files)
    write_xls(root / "points.xls", files.points.header, files.points.rows, "Telemetry")
    pd.testing.assert_frame_equal(load_site(root).points, csv)


def test_a_point_list_in_a_format_not_read_is_named(tmp_path, files):
    root = files.write(tmp_path)
    (root / "points.csv").rename(root / "points.numbers")
    problem = find(problems_of(root), "points.numbers", None, None)
    assert "does not read a point list in this format" in problem.message
    assert "points.xlsx" in problem.message


def test_bad_cell_in_ods_names_its_sheet(tmp_path):
    root, files = small_site(tmp_path)
    files.points.set(4, "accuracy_pct", "-1")
    (root / "site.toml").write_text(SITE_TOML + '[points]\nsheet = "Telemetry"\n')
    write_ods(root / "points.ods", files.points.header, files.points.rows, "Telemetry")
    problem = find(problems_of(root), "points.ods [Telemetry]", 4, "accuracy_pct (G)")
    assert problem.message == "must be greater than zero, not -1"


def test_unknown_sheet_is_an_error_at_its_site_toml_line(tmp_path):
    root, files = small_site(tmp_path)
    (root / "site.toml").write_text(SITE_TOML + '\n[points]\nsheet = "Analogs"\n')
    write_xlsx(root / "points.xlsx", files.points.header, files.points.rows, "Sheet1")
    problem = find(problems_of(root), "site.toml", 9, "sheet")
    assert problem.message == "points.xlsx has no sheet 'Analogs' (its sheets: 'Sheet1')"


def test_csv_headers_by_alias_read_like_calibras_names(tmp_path, files):
    expected = load_site(files.write(tmp_path / "plain")).points
    files.points.header = [RENAMED.get(c, c) for c in files.points.header]
    files.toml = SITE_TOML + '[points.columns]\ndevice = "scada  DEVICE"\n'
    pd.testing.assert_frame_equal(load_site(files.write(tmp_path / "aliased")).points, expected)


def test_two_headers_for_one_column_is_an_error_naming_both(tmp_path, files):
    files.points.header[0] = "Point"
    files.points.header[files.points.header.index("note")] = "Name"
    problem = find(problems_of(files.write(tmp_path)), "points.csv", 1, "Point")
    assert "columns 1 ('Point') and 15 ('Name') both read as tag" in problem.message


def test_mapping_errors_name_the_site_toml_line_and_key(tmp_path, files):
    files.toml = SITE_TOML + '\n[points.columns]\nwattage = "MW"\ndevice = "Transducer id"\n'
    problems = problems_of(files.write(tmp_path))
    unknown = find(problems, "site.toml", 9, "wattage")
    assert unknown.message.startswith("not a column of calibra's point list")
    missing = find(problems, "site.toml", 10, "device")
    assert missing.message == "'Transducer id' is not a header of points.csv"


def test_a_header_a_mapping_replaces_is_not_read_and_says_so(tmp_path, files):
    files.points.add_column("Equipment", "X")
    files.toml = SITE_TOML + '[points.columns]\nelement = "element"\n'
    problem = find(problems_of(files.write(tmp_path)), "points.csv", 1, "Equipment", "warning")
    assert "reads element from 'element'" in problem.message


@pytest.mark.parametrize("other", ["points.xlsx", "points.ods"])
def test_two_point_lists_in_one_folder_are_an_error(tmp_path, files, other):
    root = files.write(tmp_path)
    write_xlsx(root / "points.xlsx", files.points.header, files.points.rows)
    if other != "points.xlsx":
        (root / "points.csv").unlink()
        write_ods(root / other, files.points.header, files.points.rows, "Sheet1")
    first = "points.csv" if other == "points.xlsx" else "points.xlsx"
    problem = find(problems_of(root), first, None, None)
    assert problem.message.startswith("the folder has several point lists")
    assert other in problem.message


def test_ratios_in_their_usual_spellings():
    # Ratios written primary and secondary with :, / or - (common practice, no source).
    for text in ("1200/5", "1200:5", "1200-5", "1200 / 5", " 1200 : 5 "):
        assert canonical_ratio(text) == "1200:5"
    assert canonical_ratio("132000/110") == "132000:110"
    for bad in ("1200", "1200:0", "-5:5", "1200:5:1", "inf:5", "1200 5"):
        assert canonical_ratio(bad) is None


def test_cells_written_as_a_csv_export_would_write_them(tmp_path):
    # Values round-tripped through openpyxl; ISO 8601 text from Python's isoformat.
    path = write_xlsx(tmp_path / "t.xlsx", ["a", "b", "c", "d", "e"], [])
    book = openpyxl.load_workbook(path)
    book.active.append([1200.0, 0.2, dt.datetime(2027, 3, 1, 12, 30), True, 1e-7])
    book.save(path)
    from python_calamine import CalamineWorkbook
    values = CalamineWorkbook.from_path(str(path)).get_sheet_by_index(0).to_python()[1]
    assert [cell_text(v) for v in values] == ["1200", "0.2", "2027-03-01T12:30:00", "true",
                                              "1e-07"]


def test_column_letters_follow_the_a1_reference_style():
    # Against openpyxl's get_column_letter (A…Z, AA…, the ECMA-376 A1 style).
    for index in (0, 1, 25, 26, 27, 51, 52, 701, 702, 16383):
        assert column_letter(index) == get_column_letter(index + 1)


def test_a_file_that_is_no_workbook_is_an_error_not_a_traceback(tmp_path):
    root, _ = small_site(tmp_path)
    # An .xlsx is a ZIP package (ECMA-376 Part 2, Open Packaging Conventions): text is not.
    (root / "points.xlsx").write_text("tag,quantity\n")
    problem = find(problems_of(root), "points.xlsx", None, None)
    assert problem.message.startswith("cannot read the spreadsheet")
