"""Tap changers in network/branches.csv and tap-position points: read, and every bad cell
located by file, row and column (common practice, no source, for the checks' limits)."""

import numpy as np
import pandas as pd
import pytest

from calibra.estimation.period import prepare_period
from calibra.io import load_site
from tests.io.site_builder import find, problems_of, row_of

BRANCHES = "network/branches.csv"
POINTS = "points.csv"
T1 = "TLR-T1"


def _with_changer(files, step="1.25", neutral="9", side="from"):
    files.branches.add_column("tap_step_pct").add_column("tap_neutral").add_column("tap_side")
    row = row_of(files.branches, T1)
    files.branches.set(row, "tap_step_pct", step).set(row, "tap_neutral", neutral)
    files.branches.set(row, "tap_side", side)
    return row


def _with_tap_point(files, steps=("9", "10", "", "7")):
    files.points.add_row(["TLR.T1.TAP", "tap_position", T1, "", "step", "", "",
                          "Tallis Reach", "", "TLR-RTU", "DI07", "", "", "", ""])
    table = files.snapshots["week.csv"]
    table.add_column("TLR.T1.TAP")
    for i, s in enumerate(steps):
        table.set(i + 2, "TLR.T1.TAP", s)


def test_tap_changer_columns_are_read(files, tmp_path):
    _with_changer(files, side="TO")
    br = load_site(files.write(tmp_path)).network.branches
    assert br.at[T1, "tap_step_pct"] == 1.25
    assert br.at[T1, "tap_neutral"] == 9
    assert br.at[T1, "tap_side"] == "to"
    assert np.isnan(br.at["FNH-TLR-1", "tap_step_pct"])


def test_without_the_columns_the_table_is_as_before(files, tmp_path):
    br = load_site(files.write(tmp_path)).network.branches
    assert "tap_step_pct" not in br


@pytest.mark.parametrize("column,value,message", [
    ("tap_step_pct", "-1", "greater than zero"),
    ("tap_step_pct", "abc", "not a number"),
    ("tap_neutral", "8.5", "not a whole step number"),
    ("tap_side", "middle", "not a tapped side"),
])
def test_bad_tap_changer_cell(files, tmp_path, column, value, message):
    row = _with_changer(files)
    files.branches.set(row, column, value)
    p = find(problems_of(files.write(tmp_path)), BRANCHES, row, column)
    assert message in p.message


def test_tap_changer_on_a_line_is_an_error(files, tmp_path):
    _with_changer(files)
    row = row_of(files.branches, "FNH-TLR-1")
    files.branches.set(row, "tap_step_pct", "1.25")
    p = find(problems_of(files.write(tmp_path)), BRANCHES, row, "tap_step_pct")
    assert "line has no tap changer" in p.message


def test_neutral_without_step_size_is_an_error(files, tmp_path):
    row = _with_changer(files, step="")
    p = find(problems_of(files.write(tmp_path)), BRANCHES, row, "tap_step_pct")
    assert "needs its step size" in p.message


def test_large_step_is_a_warning(files, tmp_path):
    row = _with_changer(files, step="12.5")
    site = load_site(files.write(tmp_path))
    assert "unusually large" in find(site.problems, BRANCHES, row, "tap_step_pct",
                                     "warning").message


def test_tap_point_needs_a_tap_changer(files, tmp_path):
    _with_tap_point(files)
    p = find(problems_of(files.write(tmp_path)), POINTS, 9, "element")
    assert "has no tap changer" in p.message


def test_tap_point_on_a_line_is_an_error(files, tmp_path):
    _with_changer(files)
    _with_tap_point(files)
    files.points.set(9, "element", "FNH-TLR-1")
    p = find(problems_of(files.write(tmp_path)), POINTS, 9, "element")
    assert "needs a transformer" in p.message


def test_steps_set_the_ratio_per_snapshot_and_fallbacks_are_reported(files, tmp_path):
    """ratio = 1 + (step − neutral) × 1.25 %: the model's tap 0.985 is replaced by 1.0 at the
    neutral step 9, 1.0125 at step 10, held over the missing value, 0.975 at step 7."""
    _with_changer(files)
    _with_tap_point(files, steps=("", "10", "", "7"))
    site = load_site(files.write(tmp_path))
    assert site.points.at["TLR.T1.TAP", "quantity"] == "tap_position"
    assert site.errors == []
    period = prepare_period(site)
    b = site.network.branches.index.get_loc(T1)
    factor = period.in_service[:, b]
    ratio = factor * 0.985
    assert ratio[1:] == pytest.approx([1.0125, 1.0125, 0.975])
    assert factor[0] == pytest.approx(1.0)  # before the first step: the model's tap
    assert period.in_service[3, site.network.branches.index.get_loc("TLR-PLM-1")] == 0
    assert [f.snapshots for f in period.tap_fallbacks] == [1]
    assert "model's tap ratio" in period.tap_fallbacks[0].describe()


def test_a_step_that_is_not_whole_is_a_warning(files, tmp_path):
    _with_changer(files)
    _with_tap_point(files, steps=("9", "9.5", "10", "10"))
    site = load_site(files.write(tmp_path))
    p = find(site.problems, "snapshots/week.csv", 3, "TLR.T1.TAP", "warning")
    assert "not a whole step number" in p.message
    assert pd.isna(site.snapshots["TLR.T1.TAP"].iloc[1])
