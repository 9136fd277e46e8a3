"""Problems in points.csv, each located by file, row and column."""

import numpy as np
import pytest

from calibra.io import load_site
from calibra.model.points import POINT_COLUMNS, default_sigma
from tests.io.site_builder import find, problem_for_cell, problems_of

POINTS = "points.csv"


def test_valid_point_list(files, tmp_path):
    site = load_site(files.write(tmp_path))
    points = site.points
    assert list(points.columns) == POINT_COLUMNS
    assert points.index.name == "tag"
    assert points.at["TLR.FNH1.P", "end"] == "to"
    assert points.at["FNH.V", "end"] == ""
    assert points.at["FNH.V", "sigma"] == 0.3
    assert np.isnan(points.at["TLR.PLM1.CB", "full_scale"])
    # accuracy class as 3σ (common practice, no source): 0.5 % of 200 MW / 3
    assert default_sigma(points)["FNH.TLR1.P"] == pytest.approx(0.5 / 100 * 200 / 3)


def test_optional_columns_may_be_absent(files, tmp_path):
    for column in ("rtu", "channel", "ct_ratio", "vt_ratio", "sigma", "note"):
        files.points.drop_column(column)
    site = load_site(files.write(tmp_path))
    assert list(site.points.columns) == POINT_COLUMNS
    assert site.points["sigma"].isna().all()
    assert (site.points["ct_ratio"] == "").all()


def test_units_and_quantities_in_any_case(files, tmp_path):
    files.points.set(3, "unit", "MVAR").set(3, "quantity", "Q_Flow")
    site = load_site(files.write(tmp_path))
    assert site.points.at["FNH.TLR1.Q", "unit"] == "Mvar"
    assert site.points.at["FNH.TLR1.Q", "quantity"] == "q_flow"


ONE_BAD_CELL = [
    pytest.param(4, "tag", "FNH.TLR1.P", "duplicate tag 'FNH.TLR1.P' (first at row 2)",
                 id="duplicate-tag"),
    pytest.param(5, "quantity", "current",
                 "'current' is not a quantity (one of p_flow, q_flow, i_magnitude, "
                 "branch_status, p_injection, q_injection, v_magnitude, tap_position)",
                 id="quantity"),
    pytest.param(2, "element", "FNH-TLR-9", "unknown branch 'FNH-TLR-9'", id="unknown-branch"),
    pytest.param(6, "element", "FNH11", "unknown bus 'FNH11'", id="unknown-bus"),
    pytest.param(2, "element", "FNH132", "'FNH132' is a bus, but p_flow needs a branch",
                 id="bus-for-flow"),
    pytest.param(6, "element", "TLR-T1", "'TLR-T1' is a branch, but v_magnitude needs a bus",
                 id="branch-for-voltage"),
    pytest.param(3, "end", "", "empty; q_flow needs the branch end: from or to",
                 id="end-missing"),
    pytest.param(7, "end", "from",
                 "'from' given, but p_injection has no branch end; leave it empty",
                 id="end-not-allowed"),
    pytest.param(2, "end", "sending", "'sending' is not a branch end (one of from, to)",
                 id="end-word"),
    pytest.param(2, "unit", "Mvar", "unit 'Mvar' is not allowed for p_flow (use MW)",
                 id="unit-for-quantity"),
    pytest.param(6, "unit", "pu", "'pu' is not a unit (one of MW, Mvar, A, status, kV, step)",
                 id="unknown-unit"),
    pytest.param(4, "full_scale", "0", "must be greater than zero, not 0", id="full-scale"),
    pytest.param(4, "accuracy_pct", "-0.5", "must be greater than zero, not -0.5",
                 id="accuracy"),
    pytest.param(5, "full_scale", "", "empty; a positive number is required for i_magnitude",
                 id="full-scale-missing"),
    pytest.param(6, "sigma", "0", "must be greater than zero, not 0", id="sigma"),
    pytest.param(3, "substation", "", "empty; a value is required", id="substation"),
    pytest.param(4, "device", "", "empty; a value is required (only branch_status and "
                 "tap_position points may leave it empty)", id="device"),
    pytest.param(8, "full_scale", "-1", "must not be negative, not -1 (a branch_status point "
                 "may leave it empty or give 0)", id="status-full-scale-negative"),
    pytest.param(5, "accuracy_pct", "0", "must be greater than zero, not 0",
                 id="analog-accuracy-zero"),
] + [
    pytest.param(2, column, value,
                 f"'{value}' is not a ratio of two positive numbers such as 1200:5",
                 id=f"{column}-{value}")
    for column, value in [("ct_ratio", "1200"), ("vt_ratio", "132kV:110"),
                          ("ct_ratio", "1200:0"), ("ct_ratio", "inf:5")]
]


@pytest.mark.parametrize("row,column,value,message", ONE_BAD_CELL)
def test_one_bad_cell(files, tmp_path, row, column, value, message):
    assert problem_for_cell(files, tmp_path, "points", row, column, value).message == message


def test_status_point_needs_no_full_scale(files, tmp_path):
    site = load_site(files.write(tmp_path))
    assert np.isnan(site.points.at["TLR.PLM1.CB", "accuracy_pct"])


# Point lists exported from control systems leave device, full scale and accuracy class blank
# (or 0) for breaker status: a status contact has neither (common practice, no source).
@pytest.mark.parametrize("device,full_scale,accuracy", [
    pytest.param("", "", "", id="all-empty"),
    pytest.param("", "0", "0", id="zeros"),
    pytest.param("", "0.0", "", id="zero-and-empty"),
    pytest.param("TLR-CB3", "1", "0", id="device-and-scale-given"),
])
def test_status_point_may_leave_device_and_scale_empty(files, tmp_path, device, full_scale,
                                                       accuracy):
    files.points.set(8, "device", device).set(8, "full_scale", full_scale)
    files.points.set(8, "accuracy_pct", accuracy)
    site = load_site(files.write(tmp_path))
    assert site.problems == []
    point = site.points.loc["TLR.PLM1.CB"]
    assert point["device"] == device
    if full_scale == "1":
        assert point["full_scale"] == 1.0  # a positive value given is kept
    else:
        assert np.isnan(point["full_scale"])
    assert np.isnan(point["accuracy_pct"])
    # 0 means "not applicable": stored as NaN, so no class limit of 0 reaches anything
    assert not (site.points[["full_scale", "accuracy_pct"]] == 0).any().any()


@pytest.mark.parametrize("column,value,message", [
    ("device", "", "empty; a value is required (only branch_status and tap_position points "
     "may leave it empty)"),
    ("full_scale", "0", "must be greater than zero, not 0"),
    ("accuracy_pct", "", "empty; a positive number is required for p_flow"),
    ("accuracy_pct", "0", "must be greater than zero, not 0"),
])
def test_analog_points_keep_their_rules(files, tmp_path, column, value, message):
    assert problem_for_cell(files, tmp_path, "points", 2, column, value).message == message


def test_a_status_row_turned_analog_needs_its_scale(files, tmp_path):
    # the same blank cells are errors once the row is an analog point
    files.points.set(8, "quantity", "p_flow").set(8, "end", "from").set(8, "unit", "MW")
    files.points.set(8, "device", "")
    problems = problems_of(files.write(tmp_path))
    find(problems, POINTS, 8, "device")
    assert find(problems, POINTS, 8, "full_scale").message == (
        "empty; a positive number is required for p_flow")


def test_point_in_another_substation_than_its_branch_end_is_a_warning(files, tmp_path):
    files.points.set(4, "substation", "Fenwick Hollow")  # TLR.FNH1.P is at the Tallis end
    site = load_site(files.write(tmp_path))
    p = find(site.problems, POINTS, 4, "substation", "warning")
    assert "'Tallis Reach' (bus 'TLR132')" in p.message


def test_points_checked_even_when_the_network_has_errors(files, tmp_path):
    files.buses.set(2, "kv", "high")
    files.points.set(6, "element", "NOWHERE")
    problems = problems_of(files.write(tmp_path))
    find(problems, "network/buses.csv", 2, "kv")
    find(problems, POINTS, 6, "element")


def test_rows_count_records_like_a_spreadsheet(files, tmp_path):
    # a quoted note with a line break is one cell; the next record is still row 8
    files.points.set(7, "note", "feeder total\nincludes embedded generation")
    files.points.set(8, "substation", "")
    p = find(problems_of(files.write(tmp_path)), POINTS, 8, "substation")
    assert p.message == "empty; a value is required"
