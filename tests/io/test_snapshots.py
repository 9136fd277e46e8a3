"""Reading the snapshot tables: times, values, several files, and what is skipped."""

import gzip
import time

import numpy as np
import pandas as pd
import pytest

from calibra.io import load_site, summarize
from calibra.model.site import SiteLoadError
from tests.io.site_builder import POINTS, SNAPSHOTS, Table, find, problems_of

WEEK = "snapshots/week.csv"


def utc(text: str) -> pd.Timestamp:
    return pd.Timestamp(text, tz="UTC")


def test_naive_times_are_site_time_and_become_utc(files, tmp_path):
    site = load_site(files.write(tmp_path))
    snaps = site.snapshots
    # Europe/Berlin is UTC+1 in early March (IANA tz database)
    assert snaps.index[0] == utc("2024-03-04 09:00")
    assert str(snaps.index.tz) == "UTC" and snaps.index.name == "timestamp"
    assert list(snaps.columns) == list(site.points.index)
    assert (snaps.dtypes == np.float64).all()
    assert snaps.at[utc("2024-03-04 09:01"), "TLR.T1.I"] == 299.8
    assert snaps["TLR.PLM1.CB"].tolist() == [1.0, 1.0, 1.0, 0.0]


def test_times_with_offsets_are_converted(files, tmp_path):
    table = files.snapshots["week.csv"]
    table.set(2, "timestamp", "2024-03-04T10:00:00+01:00")
    table.set(3, "timestamp", "2024-03-04T09:01:00Z")
    table.set(4, "timestamp", "2024-03-04T04:02:00-05:00")
    table.set(5, "timestamp", "2024-03-04T09:03:00+00:00")
    site = load_site(files.write(tmp_path))
    assert list(site.snapshots.index) == [utc(f"2024-03-04 09:0{k}") for k in range(4)]
    assert site.problems == []


def test_mixing_naive_and_offset_times_is_a_warning(files, tmp_path):
    files.snapshots["week.csv"].set(2, "timestamp", "2024-03-04T10:00:00+01:00")
    site = load_site(files.write(tmp_path))
    p = find(site.problems, WEEK, 3, "timestamp", "warning")
    assert "mixes times with and without a UTC offset" in p.message and p.count == 3
    assert site.snapshots.index.is_monotonic_increasing and len(site.snapshots) == 4


def test_offset_time_with_trailing_junk_is_skipped_and_local_times_after_it_stay_local(
    files, tmp_path
):
    # pandas 2.x's batch ISO 8601 parse carries the offset of a time it fails to read on to
    # the local times after it (found by the property test of tests/robustness)
    files.snapshots["week.csv"].set(3, "timestamp", "2024-03-04T10:01:00+01:00,56")
    site = load_site(files.write(tmp_path))
    p = find(site.problems, WEEK, 3, "timestamp", "warning")
    assert "not an ISO 8601 time" in p.message
    # Europe/Berlin is UTC+1 in early March (IANA tz database)
    assert list(site.snapshots.index) == [utc("2024-03-04 09:00"), utc("2024-03-04 09:02"),
                                          utc("2024-03-04 09:03")]


def test_local_time_skipped_by_daylight_saving_is_reported_per_row(files, tmp_path):
    # Europe/Berlin: clocks go from 02:00 to 03:00 on 2024-03-31 (EU summer-time rule)
    table = files.snapshots["week.csv"]
    for row, t in zip(range(2, 6), ["01:30", "02:15", "02:45", "03:15"], strict=True):
        table.set(row, "timestamp", f"2024-03-31 {t}")
    site = load_site(files.write(tmp_path))
    for row in (3, 4):
        p = find(site.problems, WEEK, row, "timestamp", "warning")
        assert "does not exist in Europe/Berlin" in p.message
    assert list(site.snapshots.index) == [utc("2024-03-31 00:30"), utc("2024-03-31 01:15")]


def test_repeated_hour_is_placed_by_order(files, tmp_path):
    # Europe/Berlin: 03:00 CEST goes back to 02:00 CET on 2024-10-27 (EU summer-time rule)
    table = files.snapshots["week.csv"]
    for row, t in zip(range(2, 6), ["02:20", "02:40", "02:20", "02:40"], strict=True):
        table.set(row, "timestamp", f"2024-10-27 {t}")
    site = load_site(files.write(tmp_path))
    p = find(site.problems, WEEK, 2, "timestamp", "warning")
    assert "repeated when daylight saving time ends" in p.message and p.count == 4
    expected = ["2024-10-27 00:20", "2024-10-27 00:40", "2024-10-27 01:20", "2024-10-27 01:40"]
    assert list(site.snapshots.index) == [utc(t) for t in expected]


def test_ambiguous_time_without_repetition_is_skipped_per_row(files, tmp_path):
    table = files.snapshots["week.csv"]
    for row, t in zip(range(2, 6), ["01:40", "02:20", "03:00", "03:20"], strict=True):
        table.set(row, "timestamp", f"2024-10-27 {t}")
    site = load_site(files.write(tmp_path))
    p = find(site.problems, WEEK, 3, "timestamp", "warning")
    assert "occurs twice" in p.message and "row skipped" in p.message
    assert len(site.snapshots) == 3


def test_unreadable_times_are_skipped_per_row(files, tmp_path):
    files.snapshots["week.csv"].set(3, "timestamp", "04.03.2024 10:01")
    files.snapshots["week.csv"].set(4, "timestamp", "")
    site = load_site(files.write(tmp_path))
    assert "not an ISO 8601 time" in find(site.problems, WEEK, 3, "timestamp", "warning").message
    assert "values without a time" in find(site.problems, WEEK, 4, "timestamp", "warning").message
    assert len(site.snapshots) == 2


def test_times_going_backwards_are_sorted(files, tmp_path):
    table = files.snapshots["week.csv"]
    table.rows[1], table.rows[2] = table.rows[2], table.rows[1]
    site = load_site(files.write(tmp_path))
    p = find(site.problems, WEEK, 4, "timestamp", "warning")
    assert "go backwards" in p.message
    assert site.snapshots.index.is_monotonic_increasing
    assert site.snapshots.at[utc("2024-03-04 09:01"), "TLR.T1.I"] == 299.8


def test_duplicate_times_keep_the_first_row(files, tmp_path):
    files.snapshots["week.csv"].set(4, "timestamp", "2024-03-04 10:01:00")
    site = load_site(files.write(tmp_path))
    p = find(site.problems, WEEK, 4, "timestamp", "warning")
    assert "the same time as an earlier row" in p.message
    assert len(site.snapshots) == 3
    assert site.snapshots.at[utc("2024-03-04 09:01"), "TLR.T1.I"] == 299.8


def test_text_nan_and_infinity_are_counted_and_set_missing(files, tmp_path):
    table = files.snapshots["week.csv"]
    table.set(3, "FNH.V", "ERR").set(5, "FNH.V", "ERR")
    table.set(4, "TLR.T1.I", "inf")
    table.set(2, "FNH.TLR1.Q", "NaN")
    site = load_site(files.write(tmp_path))
    text = find(site.problems, WEEK, 3, "FNH.V", "warning")
    assert text.count == 2 and text.message.startswith("'ERR' is not a number; 2 cells")
    assert find(site.problems, WEEK, 4, "TLR.T1.I", "warning").message.startswith(
        "inf is not a finite number"
    )
    assert "'NaN' is not a finite number" in find(site.problems, WEEK, 2, "FNH.TLR1.Q",
                                                  "warning").message
    snaps = site.snapshots
    assert snaps["FNH.V"].isna().sum() == 2 and snaps["TLR.T1.I"].isna().sum() == 1
    assert snaps["FNH.V"].iloc[0] == 133.1


def test_status_other_than_zero_or_one(files, tmp_path):
    files.snapshots["week.csv"].set(3, "TLR.PLM1.CB", "2").set(4, "TLR.PLM1.CB", "0.5")
    site = load_site(files.write(tmp_path))
    p = find(site.problems, WEEK, 3, "TLR.PLM1.CB", "warning")
    assert p.count == 2 and "status 2 is not 1 (closed) or 0 (open)" in p.message
    assert site.snapshots["TLR.PLM1.CB"].isna().sum() == 2


def test_column_that_is_not_a_tag_is_reported_and_not_loaded(files, tmp_path):
    files.snapshots["week.csv"].add_column("SPARE.AI7", "1.0")
    site = load_site(files.write(tmp_path))
    p = find(site.problems, WEEK, 1, "SPARE.AI7", "warning")
    assert "not a tag of the point list" in p.message
    assert "SPARE.AI7" not in site.snapshots.columns


def test_point_without_a_column_is_a_warning(files, tmp_path):
    files.snapshots["week.csv"].drop_column("FNH.V")
    site = load_site(files.write(tmp_path))
    p = find(site.problems, "points.csv", 6, "tag", "warning")
    assert p.message == "point 'FNH.V' has no values in the snapshot files"
    assert site.snapshots["FNH.V"].isna().all()


def test_duplicate_snapshot_column_is_an_error(files, tmp_path):
    files.snapshots["week.csv"].header[3] = "FNH.TLR1.P"
    p = find(problems_of(files.write(tmp_path)), WEEK, 1, "FNH.TLR1.P")
    assert "appears twice (columns 2 and 4)" in p.message


def test_first_column_must_be_timestamp(files, tmp_path):
    files.snapshots["week.csv"].header[0] = "time"
    p = find(problems_of(files.write(tmp_path)), WEEK, 1, "time")
    assert p.message == "the first column must be 'timestamp'"


def test_empty_snapshot_file_is_an_error(files, tmp_path):
    files.snapshots = {"week.csv": ""}
    problems = problems_of(files.write(tmp_path))
    assert find(problems, WEEK, None, None).message == "the file is empty"


def test_no_snapshot_files(files, tmp_path):
    files.snapshots = {}
    files.write(tmp_path)
    assert "no snapshot files" in find(problems_of(tmp_path), "snapshots", None, None).message
    site = load_site(tmp_path, require_snapshots=False)
    assert site.snapshots.shape == (0, 7) and str(site.snapshots.index.tz) == "UTC"


def test_other_files_in_the_snapshot_folder_are_reported(files, tmp_path):
    files.extra["snapshots/readme.txt"] = "exported by the historian"
    site = load_site(files.write(tmp_path))
    assert "not a snapshot file" in find(site.problems, "snapshots/readme.txt", None, None,
                                         "warning").message


def _split(table: Table, rows: slice) -> Table:
    part = Table(table.text())
    part.rows = part.rows[rows]
    return part


def test_several_files_are_read_in_time_order(files, tmp_path):
    whole = files.snapshots["week.csv"]
    # the later rows in the file whose name sorts first
    files.snapshots = {"a.csv": _split(whole, slice(2, 4)), "b.csv": _split(whole, slice(0, 2))}
    site = load_site(files.write(tmp_path))
    assert site.problems == []
    assert list(site.snapshots.index) == [utc(f"2024-03-04 09:0{k}") for k in range(4)]


def test_overlapping_files_are_reported_and_the_earlier_file_wins(files, tmp_path):
    whole = files.snapshots["week.csv"]
    later = _split(whole, slice(1, 4)).set(2, "TLR.T1.I", "999")  # the 10:01 row again
    files.snapshots = {"first.csv": _split(whole, slice(0, 2)), "second.csv": later}
    site = load_site(files.write(tmp_path))
    p = find(site.problems, "snapshots/second.csv", None, "timestamp", "warning")
    assert "overlaps snapshots/first.csv from 2024-03-04 09:01 to 2024-03-04 09:01 UTC" in (
        p.message
    )
    assert p.count == 1
    assert len(site.snapshots) == 4
    assert site.snapshots.at[utc("2024-03-04 09:01"), "TLR.T1.I"] == 299.8


def test_parquet_and_gzip_give_the_same_table(files, tmp_path):
    reference = load_site(files.write(tmp_path / "csv")).snapshots
    frame = pd.read_csv(pd.io.common.StringIO(SNAPSHOTS))
    frame["timestamp"] = pd.to_datetime(frame["timestamp"]).dt.tz_localize("Europe/Berlin")
    files.snapshots = {"week.parquet": b""}
    root = files.write(tmp_path / "parquet")
    frame.to_parquet(root / "snapshots/week.parquet")
    pd.testing.assert_frame_equal(load_site(root).snapshots, reference)
    files.snapshots = {"week.csv.gz": gzip.compress(SNAPSHOTS.encode())}
    pd.testing.assert_frame_equal(load_site(files.write(tmp_path / "gz")).snapshots, reference)


def test_parquet_with_naive_datetime_index(files, tmp_path):
    frame = pd.read_csv(pd.io.common.StringIO(SNAPSHOTS), index_col="timestamp",
                        parse_dates=["timestamp"])
    files.snapshots = {}
    root = files.write(tmp_path)
    frame.to_parquet(root / "snapshots/week.parquet")
    site = load_site(root)
    assert site.snapshots.index[0] == utc("2024-03-04 09:00")


def test_unreadable_parquet_is_an_error(files, tmp_path):
    files.snapshots = {"week.parquet": b"not parquet at all"}
    p = find(problems_of(files.write(tmp_path)), "snapshots/week.parquet", None, None)
    assert p.message.startswith("cannot read as Parquet")


def _with_decimal_commas(table: Table) -> Table:
    table.rows = [[cell.replace(".", ",") for cell in row] for row in table.rows]
    return table


def test_semicolons_and_decimal_commas(files, tmp_path):
    files.snapshots = {"week.csv": _with_decimal_commas(files.snapshots["week.csv"]).text(";")}
    site = load_site(files.write(tmp_path))
    p = find(site.problems, WEEK, None, None, "warning")
    assert p.message == "read as semicolon-separated text with decimal commas"
    assert site.snapshots.at[utc("2024-03-04 09:01"), "TLR.T1.I"] == 299.8


def test_semicolon_network_table(files, tmp_path):
    files.extra["network/branches.csv"] = _with_decimal_commas(files.branches).text(";")
    files.branches = None
    site = load_site(files.write(tmp_path))
    find(site.problems, "network/branches.csv", None, None, "warning")
    assert site.network.branches.at["TLR-T1", "tap"] == 0.985


def test_byte_order_mark_is_accepted_without_warning(files, tmp_path):
    files.snapshots = {"week.csv": b"\xef\xbb\xbf" + SNAPSHOTS.encode()}
    files.points = None
    files.extra["points.csv"] = b"\xef\xbb\xbf" + POINTS.encode()
    site = load_site(files.write(tmp_path))
    assert site.problems == []


def test_latin1_file_is_read_with_a_warning(files, tmp_path):
    files.points.set(8, "note", "Schaltfeld Süd")
    files.extra["points.csv"] = files.points.text().encode("latin-1")
    files.points = None
    site = load_site(files.write(tmp_path))
    p = find(site.problems, "points.csv", 8, None, "warning")
    assert "read as Latin-1" in p.message
    assert site.points.at["TLR.PLM1.CB", "note"] == "Schaltfeld Süd"


def test_strict_mode_raises_on_warnings(files, tmp_path):
    files.snapshots["week.csv"].set(3, "FNH.V", "ERR")
    files.write(tmp_path)
    load_site(tmp_path)
    with pytest.raises(SiteLoadError) as info:
        load_site(tmp_path, strict=True)
    assert all(p.severity == "warning" for p in info.value.problems)


def test_summary_counts(files, tmp_path):
    files.snapshots["week.csv"].set(3, "FNH.V", "").set(4, "FNH.V", "")
    s = summarize(load_site(files.write(tmp_path)))
    assert (s["buses"], s["branches"], s["substations"], s["points"]) == (5, 5, 4, 7)
    assert s["points_by_quantity"]["p_flow"] == 2 and s["points_by_quantity"]["q_injection"] == 0
    assert s["snapshots"] == 4 and s["typical_interval"] == pd.Timedelta(minutes=1)
    assert s["missing_by_point"]["FNH.V"] == 2
    assert s["missing_fraction"] == pytest.approx(2 / 28)
    assert s["first_snapshot"] == utc("2024-03-04 09:00")


def test_a_week_of_minute_data_for_400_tags_loads_fast(files, tmp_path):
    template = files.points.rows[0]
    files.points.rows = [[f"T{k:03d}.P", *template[1:]] for k in range(400)]
    files.snapshots = {}
    root = files.write(tmp_path)
    index = pd.date_range("2024-03-04", periods=10080, freq="min", tz="Europe/Berlin")
    data = np.random.default_rng(7).normal(60.0, 1.0, (len(index), 400))
    data[::97, 5] = np.nan
    frame = pd.DataFrame(data, index=index, columns=[r[0] for r in files.points.rows])
    frame.rename_axis("timestamp").to_parquet(root / "snapshots/week.parquet")
    start = time.perf_counter()
    site = load_site(root)
    elapsed = time.perf_counter() - start
    assert site.snapshots.shape == (10080, 400)
    assert site.snapshots["T005.P"].isna().sum() == len(range(0, 10080, 97))
    assert elapsed < 5.0, f"loading took {elapsed:.1f} s"


def test_row_with_more_values_than_columns(files, tmp_path):
    files.snapshots["week.csv"].rows[0].append("7.5")
    p = find(problems_of(files.write(tmp_path)), WEEK, 2, None)
    assert p.message == "more values than the 8 columns named in the header"


def test_damaged_gzip_file(files, tmp_path):
    files.snapshots = {"week.csv.gz": gzip.compress(SNAPSHOTS.encode())[:40]}
    p = find(problems_of(files.write(tmp_path)), "snapshots/week.csv.gz", None, None)
    assert p.message.startswith("cannot read the file")


def test_timestamps_that_are_all_unreadable(files, tmp_path):
    table = files.snapshots["week.csv"]
    for row in range(2, 6):
        table.set(row, "timestamp", f"0{row}/03/2024 10:00")
    problems = problems_of(files.write(tmp_path))
    assert len([p for p in problems if "not an ISO 8601 time" in p.message]) == 4
    assert find(problems, "snapshots", None, None).message == "no snapshot rows could be read"


def test_parquet_text_values_are_checked(files, tmp_path):
    frame = pd.DataFrame({
        "timestamp": pd.to_datetime(["2024-03-04 10:00", "2024-03-04 10:01"]),
        "FNH.V": ["133.1", "bad"],
        "TLR.PLM1.CB": [True, False],
    })
    files.snapshots = {}
    root = files.write(tmp_path)
    frame.to_parquet(root / "snapshots/week.parquet")
    site = load_site(root)
    p = find(site.problems, "snapshots/week.parquet", 3, "FNH.V", "warning")
    assert p.message == "'bad' is not a number; treated as missing"
    assert site.snapshots["FNH.V"].tolist()[0] == 133.1
    assert site.snapshots["TLR.PLM1.CB"].tolist() == [1.0, 0.0]
