"""The point list's stated deadband and resolution: numbers in the point's unit or percentages
of full scale, blanks inferred from the data, problems naming file, row and column, and the
warning where the snapshots contradict a stated value.

The storage rule simulated here is the usual report-by-exception one: a new value is stored
when it moves more than the deadband from the last stored value (common practice, no source).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from openpyxl.utils import get_column_letter

from calibra.io import load_site, summarize
from calibra.io.site_summary import site_summary_lines
from calibra.model.points import POINT_COLUMNS
from tests.held_series import by_exception
from tests.io.site_builder import SiteFiles, Table, find, problem_for_cell, problems_of
from tests.io.test_point_spreadsheet import write_xlsx

POINTS = "points.csv"


def _with_columns(files, deadband: dict[int, str] = (), resolution: dict[int, str] = ()):
    files.points.add_column("deadband").add_column("resolution")
    for row, text in dict(deadband).items():
        files.points.set(row, "deadband", text)
    for row, text in dict(resolution).items():
        files.points.set(row, "resolution", text)
    return files


def test_unit_and_percent_forms_read_in_the_points_unit(files, tmp_path):
    # FNH.TLR1.P (row 2): 200 MW full scale, so 0.3 % is 0.6 MW; FNH.V (row 6): 150 kV
    _with_columns(files, {2: "0.3%", 3: "0.5", 4: "1.2 MW", 6: "0.25 % FS", 7: "0"},
                  {2: "0.1", 6: "0.05%", 5: "0.5 A"})
    site = load_site(files.write(tmp_path))
    assert site.problems == []
    pts = site.points
    assert list(pts.columns) == POINT_COLUMNS
    assert pts.at["FNH.TLR1.P", "deadband"] == pytest.approx(0.6)
    assert pts.at["FNH.TLR1.Q", "deadband"] == pytest.approx(0.5)
    assert pts.at["TLR.FNH1.P", "deadband"] == pytest.approx(1.2)
    assert pts.at["FNH.V", "deadband"] == pytest.approx(0.375)
    assert pts.at["PLM.LOAD.P", "deadband"] == 0.0  # stated "none", not "infer"
    assert np.isnan(pts.at["TLR.T1.I", "deadband"])  # blank: inferred from the data
    assert pts.at["FNH.V", "resolution"] == pytest.approx(0.075)
    assert pts.at["TLR.T1.I", "resolution"] == pytest.approx(0.5)
    assert np.isnan(pts.at["FNH.TLR1.Q", "resolution"])


def test_point_lists_without_the_columns_stay_valid(files, tmp_path):
    site = load_site(files.write(tmp_path))
    assert site.problems == []
    assert site.points[["deadband", "resolution"]].isna().all().all()


@pytest.mark.parametrize("column, row, value, message", [
    ("deadband", 2, "-0.3%", "must not be negative, not -0.3%"),
    ("deadband", 3, "-1", "must not be negative, not -1"),
    ("deadband", 2, "inf", "'inf' is not a finite number"),
    ("deadband", 2, "about 1", "'about 1' is not a number in the point's unit or a "
                               "percentage of full scale such as 0.3%"),
    ("deadband", 2, "0,5", "'0,5' is not a number in the point's unit or a percentage of full "
                           "scale such as 0.3%"),  # a comma in a '.' file: 0.5 or 5?
    ("deadband", 6, "0.5 MW", "'0.5 MW' is in MW, but the point's unit is kV"),
    ("resolution", 2, "%", "'%' is not a number in the point's unit or a percentage of full "
                           "scale such as 0.3%"),
    ("resolution", 4, "nan", "'nan' is not a finite number"),
])
def test_bad_cells_name_file_row_and_column(files, tmp_path, column, row, value, message):
    _with_columns(files)
    assert problem_for_cell(files, tmp_path, "points", row, column, value).message == message


def test_a_percentage_needs_the_points_full_scale(files, tmp_path):
    _with_columns(files, {4: "0.3%"})
    files.points.set(4, "full_scale", "")  # TLR.FNH1.P: the full scale is missing
    problems = problems_of(files.write(tmp_path))
    find(problems, POINTS, 4, "full_scale")
    assert "no valid full_scale" in find(problems, POINTS, 4, "deadband").message


def test_a_value_for_a_status_point_is_a_warning_not_dropped_silently(files, tmp_path):
    _with_columns(files, {8: "0.5"})
    site = load_site(files.write(tmp_path))
    p = find(site.problems, POINTS, 8, "deadband", "warning")
    assert p.message == "'0.5' is not used: a branch_status point has no deadband"
    assert np.isnan(site.points.at["TLR.PLM1.CB", "deadband"])


def test_a_deadband_above_a_tenth_of_full_scale_is_a_warning(files, tmp_path):
    # 25 MW of a 200 MW full scale is 12.5 %: above the 10 % the brief calls unusual
    # (common practice, no source); the value is kept as the user's word.
    _with_columns(files, {2: "25", 3: "20"})
    site = load_site(files.write(tmp_path))
    p = find(site.problems, POINTS, 2, "deadband", "warning")
    assert p.message.startswith("25 MW is 12.5 % of full scale, more than 10 %")
    assert site.points.at["FNH.TLR1.P", "deadband"] == 25.0
    assert not [q for q in site.problems if q.row == 3]  # exactly 10 %: no warning


def test_a_decimal_comma_file_reads_a_decimal_comma(files, tmp_path):
    _with_columns(files, {2: "0,3%", 3: "0,5"})
    root = files.write(tmp_path)
    text = (root / POINTS).read_text()
    table = Table(text)
    # the same table as a semicolon file with decimal commas (a European spreadsheet export)
    for r in table.rows:
        for k, h in enumerate(table.header):
            if h in ("full_scale", "accuracy_pct", "sigma"):
                r[k] = r[k].replace(".", ",")
    (root / POINTS).write_text(table.text(sep=";"))
    site = load_site(root)
    assert site.points.at["FNH.TLR1.P", "deadband"] == pytest.approx(0.6)
    assert site.points.at["FNH.TLR1.Q", "deadband"] == pytest.approx(0.5)


def test_spreadsheet_headers_by_their_usual_names(tmp_path, files):
    _with_columns(files, {2: "0.3%", 6: "0.2"}, {6: "0.04"})
    table = files.points
    header = ["Dead band" if h == "deadband" else "Resolution" if h == "resolution" else h
              for h in table.header]
    root = files.write(tmp_path)
    (root / POINTS).unlink()
    write_xlsx(root / "points.xlsx", header, table.rows)
    site = load_site(root)
    assert site.problems == []
    assert site.points.at["FNH.TLR1.P", "deadband"] == pytest.approx(0.6)
    assert site.points.at["FNH.V", "resolution"] == pytest.approx(0.04)
    # a bad cell is named by the sheet, its row and the header with its column letter
    table.set(3, "deadband", "-2")
    write_xlsx(root / "points.xlsx", header, table.rows)
    letter = get_column_letter(header.index("Dead band") + 1)  # openpyxl's A1 letters
    p = find(problems_of(root), "points.xlsx [Sheet1]", 3, f"Dead band ({letter})")
    assert p.message == "must not be negative, not -2"


def test_report_deadband_alias(tmp_path, files):
    _with_columns(files, {2: "0.5"})
    files.points.header[files.points.header.index("deadband")] = "Report deadband"
    site = load_site(files.write(tmp_path))
    assert site.points.at["FNH.TLR1.P", "deadband"] == 0.5


# ------------------------------------------------------------ stated value against the data
def _week(files, tmp_path, series: dict[str, np.ndarray]):
    """The site with 300 one-minute snapshots: the given series, the other points constant
    (a constant series never disagrees: it shows nothing)."""
    index = pd.date_range("2024-03-04 10:00", periods=300, freq="1min")
    table = pd.DataFrame({"timestamp": index.strftime("%Y-%m-%d %H:%M:%S")})
    base = Table(files.snapshots["week.csv"].text())
    for k, tag in enumerate(base.header[1:], start=1):
        table[tag] = series.get(tag, np.full(len(index), float(base.rows[0][k])))
    files.snapshots = {"week.csv": table.to_csv(index=False)}
    return files.write(tmp_path)


def _flow(seed: int = 3) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return 60 + 4 * np.sin(np.arange(300) / 40) + np.cumsum(rng.normal(0, 0.05, 300))


def test_a_stated_deadband_the_data_agree_with_gives_no_warning(files, tmp_path):
    _with_columns(files, {2: "0.3%"})  # 0.6 MW
    root = _week(files, tmp_path, {"FNH.TLR1.P": np.round(by_exception(_flow(), 0.6), 2)})
    assert [p for p in load_site(root).problems if p.column == "deadband"] == []


def test_a_stated_deadband_much_wider_than_the_data_show_is_a_warning(files, tmp_path):
    _with_columns(files, {2: "1%"})  # 2 MW stated; the readings are stored every 0.1 MW
    root = _week(files, tmp_path, {"FNH.TLR1.P": np.round(by_exception(_flow(), 0.1), 2)})
    p = find(load_site(root).problems, POINTS, 2, "deadband", "warning")
    assert "less than half the stated deadband of 2 MW" in p.message
    assert "the stated value is used" in p.message


def test_a_stated_deadband_much_narrower_than_the_data_show_is_a_warning(files, tmp_path):
    _with_columns(files, {2: "0.1"})  # 0.1 MW stated; the readings are held within 0.6 MW
    root = _week(files, tmp_path, {"FNH.TLR1.P": np.round(by_exception(_flow(), 0.6), 2)})
    p = find(load_site(root).problems, POINTS, 2, "deadband", "warning")
    assert "more than twice the stated deadband of 0.1 MW" in p.message


def test_a_stated_resolution_finer_than_the_grid_of_the_data_is_a_warning(files, tmp_path):
    _with_columns(files, resolution={2: "0.01"})  # the readings lie on a 0.25 MW grid
    root = _week(files, tmp_path, {"FNH.TLR1.P": np.round(_flow() / 0.25) * 0.25})
    p = find(load_site(root).problems, POINTS, 2, "resolution", "warning")
    assert "steps of about 0.25 MW" in p.message


def test_the_site_summary_counts_the_stated_values(files, tmp_path):
    _with_columns(files, {2: "0.3%", 3: "0.5"}, {2: "0.1"})
    site = load_site(files.write(tmp_path))
    assert summarize(site)["stated"] == {"deadband": 2, "resolution": 1}
    assert ("stated in the point list: deadband for 2, resolution for 1 (the others read from "
            "the data)") in site_summary_lines(site)
    plain = load_site(SiteFiles().write(tmp_path / "plain"))
    assert not any(line.startswith("stated") for line in site_summary_lines(plain))
