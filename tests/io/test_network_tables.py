"""Problems in network/buses.csv and network/branches.csv, each located by file, row, column."""

import numpy as np
import pytest

from calibra.io import load_site
from calibra.model.site import SiteLoadError
from tests.io.site_builder import find, problem_for_cell, problems_of

BUSES = "network/buses.csv"
BRANCHES = "network/branches.csv"


def test_valid_network_is_read_with_its_types(files, tmp_path):
    site = load_site(files.write(tmp_path))
    buses, branches = site.network.buses, site.network.branches
    assert list(buses.index) == ["FNH132", "TLR132", "TLR33", "ORB132", "PLM33"]
    assert buses.at["TLR33", "b_shunt_mvar"] == 4.5
    assert buses["zero_injection"].tolist() == [False, False, False, True, False]
    assert branches.at["TLR-T1", "tap"] == 0.985
    assert branches.at["TLR-T1", "kind"] == "transformer"
    assert branches["in_service"].dtype == bool
    assert site.network.reference_bus == "FNH132"
    assert site.problems == []


def test_missing_required_column(files, tmp_path):
    files.buses.drop_column("kv")
    p = find(problems_of(files.write(tmp_path)), BUSES, 1, "kv")
    assert "required column is missing" in p.message


def test_extra_column_is_a_warning_and_the_site_loads(files, tmp_path):
    files.branches.add_column("owner", "grid co")
    site = load_site(files.write(tmp_path))
    p = find(site.problems, BRANCHES, 1, "owner", "warning")
    assert "unknown column" in p.message
    assert "owner" not in site.network.branches.columns


def test_optional_columns_may_be_absent(files, tmp_path):
    files.branches.drop_column("in_service").drop_column("name")
    files.buses.drop_column("name")
    site = load_site(files.write(tmp_path))
    assert site.network.branches["in_service"].all()
    assert site.network.buses.at["PLM33", "name"] == "PLM33"


def test_column_names_ignore_case_and_spaces(files, tmp_path):
    files.buses.header = [f" {h.upper()} " for h in files.buses.header]
    site = load_site(files.write(tmp_path))
    assert site.network.buses.at["FNH132", "kv"] == 132.0


def test_problem_text_names_file_row_and_column(files, tmp_path):
    p = problem_for_cell(files, tmp_path, "buses", 6, "kv", "abc")  # the fifth bus
    assert str(p) == "error: network/buses.csv, row 6, column 'kv': 'abc' is not a number"


ONE_BAD_CELL = [
    pytest.param("buses", 6, "kv", "abc", "'abc' is not a number", id="text-in-number"),
    pytest.param("branches", 3, "x", "nan", "'nan' is not a finite number", id="nan"),
    pytest.param("branches", 3, "x", "NaN", "'NaN' is not a finite number", id="NaN"),
    pytest.param("branches", 3, "x", "inf", "'inf' is not a finite number", id="inf"),
    pytest.param("branches", 3, "r", "-Infinity", "'-Infinity' is not a finite number",
                 id="-infinity"),
    pytest.param("branches", 4, "r", "", "empty; a number is required", id="empty-number"),
    pytest.param("buses", 3, "kv", "-132", "must be greater than zero, not -132",
                 id="negative-kv"),
    pytest.param("buses", 5, "zero_injection", "maybe",
                 "'maybe' is not true/false (also accepted: yes/no, 1/0)", id="boolean"),
    pytest.param("buses", 5, "zero_injection", "", "empty; true or false is required",
                 id="empty-boolean"),
    pytest.param("buses", 4, "bus", "TLR132", "duplicate bus id 'TLR132' (first at row 3)",
                 id="duplicate-bus"),
    pytest.param("buses", 4, "substation", "", "empty; a value is required",
                 id="empty-substation"),
    pytest.param("branches", 6, "branch", "FNH-TLR-1",
                 "duplicate branch id 'FNH-TLR-1' (first at row 2)", id="duplicate-branch"),
    pytest.param("branches", 5, "to_bus", "TLR11", "unknown bus 'TLR11'", id="unknown-bus"),
    pytest.param("branches", 3, "to_bus", "FNH132",
                 "the branch connects bus 'FNH132' to itself", id="same-bus"),
    pytest.param("branches", 5, "tap", "0", "must be greater than zero, not 0", id="zero-tap"),
    pytest.param("branches", 2, "kind", "cable",
                 "'cable' is not a branch kind (one of line, transformer, series_capacitor)",
                 id="kind"),
    pytest.param("branches", 2, "in_service", "off",
                 "'off' is not true/false (also accepted: yes/no, 1/0)", id="in-service"),
]


@pytest.mark.parametrize("table,row,column,value,message", ONE_BAD_CELL)
def test_one_bad_cell(files, tmp_path, table, row, column, value, message):
    assert problem_for_cell(files, tmp_path, table, row, column, value).message == message


def test_empty_optional_numbers_take_their_defaults(files, tmp_path):
    files.branches.set(2, "tap", "").set(2, "b", "").set(2, "shift_deg", "")
    files.buses.set(4, "b_shunt_mvar", "")
    site = load_site(files.write(tmp_path))
    row = site.network.branches.loc["FNH-TLR-1"]
    assert (row["tap"], row["b"], row["shift_deg"]) == (1.0, 0.0, 0.0)
    assert site.network.buses.at["TLR33", "b_shunt_mvar"] == 0.0


@pytest.mark.parametrize("word,value", [("YES", True), ("No", False), ("1", True), ("0", False)])
def test_boolean_words(files, tmp_path, word, value):
    files.buses.set(2, "zero_injection", word)
    site = load_site(files.write(tmp_path))
    assert bool(site.network.buses.at["FNH132", "zero_injection"]) is value


def test_ids_are_stripped_text(files, tmp_path):
    files.buses.set(2, "bus", "  FNH132 ")
    files.branches.set(2, "from_bus", " FNH132")
    site = load_site(files.write(tmp_path))
    assert "FNH132" in site.network.buses.index


def test_zero_r_and_x(files, tmp_path):
    files.branches.set(4, "r", "0").set(4, "x", "0.0")
    p = find(problems_of(files.write(tmp_path)), BRANCHES, 4, "x")
    assert "r and x are both zero" in p.message


def test_row_with_too_many_values(files, tmp_path):
    files.branches.rows[1].append("surplus")
    p = find(problems_of(files.write(tmp_path)), BRANCHES, 3, None)
    assert "12 values but the header names 11 columns" in p.message


def test_duplicate_column_name(files, tmp_path):
    files.buses.header[-1] = "kv"
    p = find(problems_of(files.write(tmp_path)), BUSES, 1, "kv")
    assert "appears twice (columns 3 and 7)" in p.message


def test_missing_file(files, tmp_path):
    files.write(tmp_path)
    (tmp_path / BRANCHES).unlink()
    p = find(problems_of(tmp_path), BRANCHES, None, None)
    assert p.message == "file not found"


@pytest.mark.parametrize("content", ["", "  \n\n"])
def test_empty_file(files, tmp_path, content):
    files.buses = None
    files.extra[BUSES] = content
    p = find(problems_of(files.write(tmp_path)), BUSES, None, None)
    assert p.message == "the file is empty"


def test_header_without_rows(files, tmp_path):
    files.branches.rows = []
    p = find(problems_of(files.write(tmp_path)), BRANCHES, None, None)
    assert "no data rows" in p.message


def test_blank_lines_keep_their_row_numbers(files, tmp_path):
    files.buses.set(3, "kv", "x")
    files.write(tmp_path)
    lines = (tmp_path / BUSES).read_text().splitlines()
    lines.insert(1, "")  # a blank row 2 moves the second bus from row 3 to row 4
    (tmp_path / BUSES).write_text("\n".join(lines) + "\n")
    find(problems_of(tmp_path), BUSES, 4, "kv")


def test_all_problems_are_collected_before_raising(files, tmp_path):
    files.buses.set(3, "kv", "abc")
    files.branches.set(4, "kind", "cable")
    files.points.set(3, "unit", "MWh")
    with pytest.raises(SiteLoadError) as info:
        load_site(files.write(tmp_path))
    places = {(p.file, p.row, p.column) for p in info.value.problems}
    assert {(BUSES, 3, "kv"), (BRANCHES, 4, "kind"), ("points.csv", 3, "unit")} <= places


def test_network_admittances_follow_the_table(files, tmp_path):
    # π model of one line by hand: y = 1/(r + jx), Ybus[f, f] gains y + jb/2
    # (standard branch model, the same convention as MATPOWER's makeYbus).
    files.buses.rows = files.buses.rows[:2]
    files.branches.rows = files.branches.rows[:1]
    files.snapshots["week.csv"].header = ["timestamp", "FNH.TLR1.P", "FNH.TLR1.Q"]
    files.snapshots["week.csv"].rows = [r[:3] for r in files.snapshots["week.csv"].rows]
    files.points.rows = [r for r in files.points.rows if r[0] in ("FNH.TLR1.P", "FNH.TLR1.Q")]
    site = load_site(files.write(tmp_path))
    ybus = site.network.admittance_matrices()[0].toarray()
    y = 1 / (0.012 + 0.061j)
    assert np.allclose(ybus, [[y + 0.0105j, -y], [-y, y + 0.0105j]], atol=1e-12)
