"""Loader bugs the property-based tests found, each pinned by a plain example."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from calibra.io import CdfFormatError, load_site, read_cdf
from tests.io.site_builder import find
from tests.io.site_builder import problems_of as load_problems

WEEK = "snapshots/week.csv"
FIXTURE = Path(__file__).parents[1] / "io" / "fixtures" / "ieee14.cdf"  # IEEE 14-bus case


def test_time_outside_the_nanosecond_range_is_skipped_not_a_crash(files, tmp_path):
    # '-1' reads as ISO 8601 year -1 and 9999 is a valid year; neither fits the snapshot index
    # (pandas nanosecond times span 1677-09-21 to 2262-04-11, pandas documentation).
    table = files.snapshots["week.csv"]
    table.set(3, "timestamp", "-1")
    table.set(4, "timestamp", "9999-12-31T23:59:00+00:00")
    site = load_site(files.write(tmp_path))
    for row in (3, 4):
        p = find(site.problems, WEEK, row, "timestamp", "warning")
        assert "outside the years 1678-2261" in p.message
    assert list(site.snapshots.index) == [pd.Timestamp("2024-03-04 09:00", tz="UTC"),
                                          pd.Timestamp("2024-03-04 09:03", tz="UTC")]


def test_parquet_time_outside_the_nanosecond_range(files, tmp_path):
    files.snapshots = {}
    root = files.write(tmp_path)
    stamps = pd.array([pd.Timestamp("2024-03-04 10:00"), pd.Timestamp("2024-03-04 10:01")],
                      dtype="datetime64[us]")
    frame = pd.DataFrame({"timestamp": stamps, "FNH.V": [133.1, 133.2]})
    frame.loc[1, "timestamp"] = pd.Timestamp("3000-01-01").as_unit("us")
    frame.to_parquet(root / "snapshots/week.parquet")
    site = load_site(root)
    p = find(site.problems, "snapshots/week.parquet", 3, "timestamp", "warning")
    assert "outside the years" in p.message
    assert len(site.snapshots) == 1


def test_a_line_break_in_a_cell_stays_on_one_line_of_the_problem(files, tmp_path):
    files.snapshots["week.csv"].set(3, "FNH.V", "13\n3.0")
    files.buses.set(3, "kv", "1\r\n32")
    problems = load_problems(files.write(tmp_path))
    p = find(problems, WEEK, 3, "FNH.V", "warning")
    assert p.message.startswith("'13\\n3.0' is not a number") and "\n" not in str(p)
    q = find(problems, "network/buses.csv", 3, "kv")
    assert q.message == "'1\\r\\n32' is not a number"


def test_parquet_with_a_repeated_column_name_is_reported_like_csv(files, tmp_path):
    # pyarrow's dataset reader refused such files with a message over several lines
    files.snapshots = {}
    root = files.write(tmp_path)
    table = pa.Table.from_arrays(
        [pa.array(pd.to_datetime(["2024-03-04 10:00", "2024-03-04 10:01"])),
         pa.array([133.1, 133.2]), pa.array([133.3, 133.4])],
        names=["timestamp", "FNH.V", "FNH.V"])
    pq.write_table(table, root / "snapshots/week.parquet")
    p = find(load_problems(root), "snapshots/week.parquet", 1, "FNH.V")
    assert p.message == "column appears twice (columns 2 and 3)"


def test_words_that_pandas_reads_as_the_current_time_are_not_times(files, tmp_path):
    # pandas.to_datetime(format="ISO8601") turns 'now' and 'today' into the clock time of
    # the load; ISO 8601 times start with the year
    files.snapshots["week.csv"].set(3, "timestamp", "now").set(4, "timestamp", "today")
    site = load_site(files.write(tmp_path))
    for row in (3, 4):
        assert "not an ISO 8601 time" in find(site.problems, WEEK, row, "timestamp",
                                              "warning").message
    assert len(site.snapshots) == 2


def test_classic_mac_line_ends_are_read(files, tmp_path):
    # Excel's "CSV (Macintosh)" ends lines with CR alone; the csv module refused such text
    # with a traceback ("new-line character seen in unquoted field")
    files.extra["snapshots/week.csv"] = files.snapshots.pop("week.csv").text().replace(
        "\n", "\r")
    files.extra["points.csv"] = files.points.text().replace("\n", "\r")
    files.points = None
    site = load_site(files.write(tmp_path))
    assert site.problems == [] and len(site.snapshots) == 4 and len(site.points) == 7


def test_an_empty_first_row_is_named_as_such(files, tmp_path):
    files.extra["network/buses.csv"] = "\n" + files.buses.text()
    files.buses = None
    files.extra["snapshots/week.csv"] = " \r\n" + files.snapshots.pop("week.csv").text()
    problems = load_problems(files.write(tmp_path))
    for rel in ("network/buses.csv", WEEK):
        assert find(problems, rel, 1, None).message == (
            "row 1 is empty: the column names must be in the first row")


def test_a_cell_beyond_the_csv_field_limit_is_located(files, tmp_path):
    files.points.set(4, "note", "x" * 200_000)  # Python's csv module stops at 131,072
    p = find(load_problems(files.write(tmp_path)), "points.csv", 4, None)
    assert p.message.startswith("not readable as CSV: field larger than field limit")


def test_a_bus_table_without_any_bus_id(files, tmp_path):
    # with no reference_bus in site.toml the first bus is the reference: there was none
    files.toml = files.toml.replace('reference_bus = "FNH132"\n', "")
    for row in range(2, 7):
        files.buses.set(row, "bus", "")
    problems = load_problems(files.write(tmp_path))
    assert find(problems, "network/buses.csv", None, "bus").message == (
        "no row has a bus id; the network has no bus")


def test_a_cdf_whose_branches_all_fail_is_refused_not_a_crash():
    # The bus section without cards: every branch card names an unknown bus, so no branch is
    # kept; the branch checks then saw empty columns of no numeric type (a TypeError).
    lines = FIXTURE.read_text().splitlines()
    start = lines.index(next(ln for ln in lines if ln.startswith("BUS DATA")))
    end = lines.index("-999", start)
    text = "\n".join(lines[: start + 1] + lines[end:]) + "\n"
    with pytest.raises(CdfFormatError) as info:
        read_cdf(text)
    assert any(p.column == "tap bus" for p in info.value.problems)
