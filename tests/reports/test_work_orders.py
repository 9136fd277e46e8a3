"""Work-order rows and the spreadsheet-safe CSV.

CSV injection: spreadsheets evaluate cells starting with = + - @ (also after a tab or CR);
OWASP "CSV Injection" lists these characters and the single-quote prefix as the defence [M].
"""

import csv

import numpy as np
import pandas as pd
import pytest

from calibra.reports import (
    WORK_ORDER_COLUMNS,
    check_groups,
    needing_field_work,
    spreadsheet_cell,
    work_order_rows,
    write_work_orders_csv,
)
from calibra.reports.checklist import checklist_items

TRIGGERS = ("=", "+", "-", "@", "\t", "\r", "\n")


def test_device_findings_merge_and_points_fill_in(findings, points):
    groups = check_groups(findings, points)
    reversed_group = next(g for g in groups if g.finding == "reversed")
    assert reversed_group.tags == ["MC-L1-P", "MC-L1-Q"]
    assert reversed_group.channels == ["4", "5"] and reversed_group.rtu == "RTU-MC"
    assert len(reversed_group.evidence) == 2
    assert len(groups) == len(findings) - 1, "only the device-wide pair merges"
    scale = next(g for g in groups if g.finding == "scale")
    assert any("VT ratio 132000:110" in c for c in scale.checks), "ratio from the point list"
    assert [g.substation for g in groups] == sorted(g.substation for g in groups)


def test_rows_one_per_check_with_empty_crew_boxes(findings, points):
    rows = work_order_rows(findings, points, site_name="Fernhollow")
    assert list(rows.columns) == WORK_ORDER_COLUMNS
    expected = sum(len(g.checks) for g in check_groups(findings, points))
    assert len(rows) == expected
    assert (rows[["as_found", "as_left", "initials", "date"]] == "").all().all()
    assert set(rows["site"]) == {"Fernhollow"}
    offset = rows[rows["tags"] == "AV-G1-P"]
    assert set(offset["offset"]) == {4.2} and set(offset["channel"]) == {"6"}


def test_findings_read_back_from_csv_work_too(findings, points, tmp_path):
    findings.to_csv(tmp_path / "findings.csv", index=False)
    again = pd.read_csv(tmp_path / "findings.csv", dtype={"channel": str, "rtu": str})
    assert len(work_order_rows(again, points)) == len(work_order_rows(findings, points))


def test_tags_missing_from_the_point_list_are_kept(findings):
    rows = work_order_rows(findings, None)
    assert set(rows["tags"]) >= {"KB-L4-P", "AV-G1-P"}


def test_missing_columns_are_named(findings, points):
    with pytest.raises(ValueError, match="lack the column.*evidence"):
        check_groups(findings.drop(columns=["evidence"]), points)


def test_field_work_leaves_out_repaired_verified_dismissed(findings):
    states = ["new", "confirmed", "corrected", "repaired", "verified", "dismissed", "new",
              "corrected"]
    kept = needing_field_work(findings.assign(state=states))
    assert list(kept["state"]) == ["new", "confirmed", "corrected", "new", "corrected"]
    assert needing_field_work(findings) is findings


@pytest.mark.parametrize(("value", "cell"), [
    ("=1+1", "'=1+1"), ("+41", "+41"), ("+4 1", "'+4 1"), ("-2+3", "'-2+3"),
    ("@SUM(A1)", "'@SUM(A1)"), ("\t=1", "'\t=1"), ("\r=1", "'\r=1"), ("  =1", "'  =1"),
    ("＝1", "'＝1"), ("-4.2", "-4.2"), ("1e-3", "1e-3"), ("MC-L1-P", "MC-L1-P"),
    (-4.2, -4.2), (np.float64(-1.0), -1.0), (np.int64(-3), -3), (float("nan"), ""),
    (None, ""), (float("-inf"), "'-inf"), (True, "true"), (pd.NaT, ""),
])
def test_spreadsheet_cell(value, cell):
    assert spreadsheet_cell(value) == cell


def _hostile(findings: pd.DataFrame) -> pd.DataFrame:
    hostile = findings.copy()
    hostile.loc[0, "tag"] = "=cmd|' /C calc'!A0"
    hostile.loc[1, "tag"] = "@SUM(1+1)*cmd|' /C calc'!A0"
    hostile.loc[2, "device"] = "+IMPORTXML(\"http://x\")"
    hostile.loc[3, "substation"] = "-2+3"
    hostile.loc[4, "evidence"] = "\t=1+1"
    hostile.loc[6, "offset"] = -4.2
    return hostile


def test_csv_cannot_run_formulas_and_keeps_negative_numbers(findings, points, tmp_path):
    path = write_work_orders_csv(_hostile(findings), points, tmp_path / "orders.csv",
                                 site_name="=Fernhollow")
    with path.open(encoding="utf-8-sig", newline="") as handle:
        table = list(csv.reader(handle))
    assert table[0] == WORK_ORDER_COLUMNS
    cells = [cell for row in table[1:] for cell in row]
    for cell in cells:
        if cell.lstrip(" ").startswith(TRIGGERS) or cell.startswith(TRIGGERS):
            float(cell)  # only plain numbers may start with + or -
    assert "'=cmd|' /C calc'!A0, @SUM(1+1)*cmd|' /C calc'!A0" in cells, "merged device tags"
    assert "'-2+3" in cells and "'=Fernhollow" in cells and "'=1+1" in cells
    offset_col = WORK_ORDER_COLUMNS.index("offset")
    assert "-4.2" in [row[offset_col] for row in table[1:]], "a negative number stays a number"
    # nothing was lost on the way: every check of every finding is in the file
    assert len(table) - 1 == sum(len(checklist_items(r)) for _, r in findings.iterrows()
                                 if r["tag"] != "MC-L1-Q")


def test_csv_keeps_non_ascii_text(findings, points, tmp_path):
    path = write_work_orders_csv(findings, points, tmp_path / "o.csv", site_name="Fernhollow")
    assert path.read_bytes().startswith(b"\xef\xbb\xbf"), "BOM, so spreadsheets read UTF-8"
    assert 'Ash & Vale <North> ""Ölmühle""' in path.read_text(encoding="utf-8-sig")
