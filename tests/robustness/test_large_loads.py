"""Loads that are too large are refused before they are read, with what to do; a long
history can be loaded a period at a time in bounded memory.

Sizes: a float64 value takes 8 bytes (IEEE 754 double precision); a year of one-minute data is
525,600 snapshots (365 × 1,440). No test allocates the tables it talks about: the big files
are all-null Parquet columns (a few kilobytes on disk) or the limit is set low.
"""

from __future__ import annotations

import gzip
import io
import time
import tracemalloc

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from calibra.io import load_site
from calibra.io.snapshot_size import (
    MEMORY_LIMIT_ENV,
    estimate_rows,
    format_bytes,
    memory_limit,
    parse_size,
)
from calibra.model.site import SiteLoadError
from tests.io.site_builder import find
from tests.robustness.small_site import SNAPSHOT_FILE, SiteTexts, brackwater

YEAR_OF_MINUTES = 365 * 24 * 60
FIVE_THOUSAND = 5000


def _points_csv(tags: list[str]) -> str:
    head = "tag,quantity,element,end,unit,full_scale,accuracy_pct,substation,device\n"
    return head + "".join(f"{t},p_flow,WRF-CSH,from,MW,100,0.5,Wrenfold,D{k // 2}\n"
                          for k, t in enumerate(tags))


def _year_site(tmp_path, points: int = FIVE_THOUSAND) -> tuple:
    """A site of ``points`` points with a year of one-minute rows in its snapshot file. The
    loaded table has a column per point whether or not the file has one, so the file holds
    only the first 20 tags, as all-null columns: small, and quick to write."""
    texts, _ = brackwater()
    tags = [f"WRENFOLD.P{k:04d}.MW" for k in range(points)]
    files = {k: v for k, v in texts.files.items() if k not in (SNAPSHOT_FILE, "points.csv")}
    files["points.csv"] = _points_csv(tags).encode()
    root = SiteTexts(files).write(tmp_path / "site")
    index = pd.date_range("2026-01-01", periods=YEAR_OF_MINUTES, freq="min", tz="UTC")
    arrays = [pa.array(index.as_unit("ms"))] + [pa.nulls(YEAR_OF_MINUTES, pa.float32())] * 20
    pq.write_table(pa.Table.from_arrays(arrays, names=["timestamp", *tags[:20]]),
                   root / "snapshots/year.parquet", row_group_size=YEAR_OF_MINUTES)
    return root, tags


def _traced(load, *args, **kwargs):
    """What ``load(...)`` returns (or the SiteLoadError it raises) and its peak of memory."""
    tracemalloc.start()
    try:
        result = load(*args, **kwargs)
    except SiteLoadError as exc:
        result = exc
    finally:
        peak = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
    return result, peak


def test_a_year_of_minutes_for_5000_points_is_refused_before_reading(tmp_path, monkeypatch):
    monkeypatch.delenv(MEMORY_LIMIT_ENV, raising=False)
    root, _ = _year_site(tmp_path)
    start = time.perf_counter()
    refused, peak = _traced(load_site, root, memory_limit=4 * 2**30)
    seconds = time.perf_counter() - start
    assert isinstance(refused, SiteLoadError)
    p = find(refused.problems, "snapshots", None, None)
    need = YEAR_OF_MINUTES * (FIVE_THOUSAND + 1) * 8  # float64 values and int64 times
    assert f"hold {YEAR_OF_MINUTES:,} rows for 5,000 points" in p.message
    assert format_bytes(need) == "21 GB" and "21 GB in memory as float64" in p.message
    assert "more than the limit of 4.3 GB" in p.message
    assert "snapshots/year.parquet" in p.message
    assert "--from/--to" in p.message and "split the files" in p.message
    assert MEMORY_LIMIT_ENV in p.message
    assert seconds < 5.0 and peak < 50 * 2**20, (seconds, peak)


def test_the_limit_comes_from_the_environment(tmp_path, monkeypatch):
    texts, _ = brackwater()
    root = texts.write(tmp_path / "site")
    monkeypatch.setenv(MEMORY_LIMIT_ENV, "10kB")
    assert memory_limit() == 10_000
    with pytest.raises(SiteLoadError) as info:
        load_site(root)
    # 36 rows × (40 points + the time) × 8 bytes = 11,808 bytes
    assert "36 rows for 40 points: 12 kB in memory as float64, more than the limit of 10 kB" \
        in find(info.value.problems, "snapshots", None, None).message
    monkeypatch.setenv(MEMORY_LIMIT_ENV, "0")
    assert memory_limit() is None and len(load_site(root).snapshots) == 36
    monkeypatch.setenv(MEMORY_LIMIT_ENV, "lots")
    with pytest.raises(SiteLoadError) as info:
        load_site(root)
    assert find(info.value.problems, MEMORY_LIMIT_ENV, None, None).message == (
        "'lots' is not a size such as 6GB or 512MiB")


def test_default_limit_is_the_smaller_of_4_gib_and_an_eighth_of_memory(monkeypatch):
    monkeypatch.delenv(MEMORY_LIMIT_ENV, raising=False)
    monkeypatch.setattr("calibra.io.snapshot_size.physical_memory", lambda: 8 * 2**30)
    assert memory_limit() == 2**30
    monkeypatch.setattr("calibra.io.snapshot_size.physical_memory", lambda: 256 * 2**30)
    assert memory_limit() == 4 * 2**30


@pytest.mark.parametrize("text, size", [("6GB", 6 * 10**9), ("512 MiB", 512 * 2**20),
                                        ("1e9", 10**9), ("2.5G", 2.5e9), ("0", 0)])
def test_sizes(text, size):
    assert parse_size(text) == size


def test_csv_rows_are_estimated_from_the_file_size(tmp_path):
    # 200,000 rows of the same length: the estimate from the first 256 KiB is exact
    # (common practice, no source: rows ≈ size / mean line length)
    line = "2026-01-01 00:00:00,123.456,-78.9\n"
    text = "timestamp,A,B\n" + line * 200_000
    (tmp_path / "a.csv").write_text(text)
    (tmp_path / "a.csv.gz").write_bytes(gzip.compress(text.encode()))
    for name in ("a.csv", "a.csv.gz"):
        found = estimate_rows(tmp_path / name, name)
        assert abs(found.rows - 200_000) < 2_000, found


def test_a_period_is_read_in_bounded_memory(tmp_path):
    # a week of one-minute data for 40 points as CSV and as Parquet; one day is loaded
    texts, site = brackwater()
    tags = list(site.points.index)
    index = pd.date_range("2026-04-06", periods=7 * 1440, freq="min", tz="UTC")
    values = np.random.default_rng(5).normal(50.0, 5.0, (len(index), len(tags)))
    status = site.points["quantity"].eq("branch_status").to_numpy()
    values[:, status] = 1.0
    frame = pd.DataFrame(values.round(3), index=index, columns=tags).rename_axis("timestamp")
    files = {k: v for k, v in texts.files.items() if k != SNAPSHOT_FILE}
    for kind in ("csv", "parquet"):
        root = SiteTexts(files).write(tmp_path / kind)
        if kind == "csv":
            frame.to_csv(root / "snapshots/week.csv", date_format="%Y-%m-%dT%H:%M:%SZ")
        else:
            frame.to_parquet(root / "snapshots/week.parquet", row_group_size=1440)
        site, peak_whole = _traced(load_site, root)
        whole = site.snapshots
        part, peak_part = _traced(load_site, root, start="2026-04-08T00:00Z",
                                  end="2026-04-08T23:59Z",
                                  memory_limit=whole.memory_usage().sum() // 3)
        day = whole.loc["2026-04-08T00:00Z":"2026-04-08T23:59Z"]
        pd.testing.assert_frame_equal(part.snapshots, day)
        assert len(day) == 1440
        # one day of seven: the peak must be far below that of reading everything
        # (measured: CSV 4 MB against 18 MB, Parquet 1.6 MB against 10 MB)
        assert peak_part < 0.4 * peak_whole, (kind, peak_part, peak_whole)


def test_a_period_too_large_is_refused_with_the_period(tmp_path):
    texts, _ = brackwater()
    root = texts.write(tmp_path / "site")
    with pytest.raises(SiteLoadError) as info:
        load_site(root, start="2026-04-14 08:00", memory_limit=1000)
    p = find(info.value.problems, "snapshots", None, None)
    # local 08:00 ADT is 11:00 UTC (America/Halifax is UTC-3 in April, IANA tz database)
    assert p.message.startswith("the period from 2026-04-14 11:00 UTC to the end "
                                "(snapshots/day.csv) hold 28 rows")


def test_a_period_without_snapshots_is_a_warning_and_an_empty_table(tmp_path):
    texts, _ = brackwater()
    root = texts.write(tmp_path / "site")
    site = load_site(root, start="2030-01-01")
    assert site.snapshots.shape == (0, 40)
    assert find(site.problems, "snapshots", None, None, "warning").message.startswith(
        "no snapshots from 2030-01-01 04:00 UTC")


def test_period_times_that_are_not_one_moment(tmp_path):
    texts, _ = brackwater()
    root = texts.write(tmp_path / "site")
    with pytest.raises(ValueError, match="not a time"):
        load_site(root, start="the fourteenth")
    # 2026-03-08 02:30 does not exist in America/Halifax (clocks go from 02:00 to 03:00)
    with pytest.raises(ValueError, match="give a UTC offset"):
        load_site(root, end="2026-03-08 02:30")


def test_parquet_period_from_an_index_column(tmp_path):
    # pandas stores a named DatetimeIndex as a column listed in its Parquet metadata
    texts, site = brackwater()
    files = {k: v for k, v in texts.files.items() if k != SNAPSHOT_FILE}
    root = SiteTexts(files).write(tmp_path / "site")
    site.snapshots.rename_axis("timestamp").to_parquet(root / "snapshots/day.parquet")
    part = load_site(root, end="2026-04-14 07:00")
    assert len(part.snapshots) == 5 and part.problems == []
    buffer = io.BytesIO()
    site.snapshots.reset_index(drop=True).to_parquet(buffer)
    (root / "snapshots/day.parquet").write_bytes(buffer.getvalue())
    with pytest.raises(SiteLoadError) as info:
        load_site(root, end="2026-04-14 07:00")
    assert "the first column must be 'timestamp'" in str(info.value)


def test_a_header_of_5000_tags_is_read_whole(tmp_path):
    # the header (about 95 kB) is longer than the first 64 KiB the period reader looks at
    root, tags = _year_site(tmp_path)
    (root / "snapshots/year.parquet").unlink()
    index = pd.date_range("2026-01-01", periods=30, freq="min", tz="UTC")
    frame = pd.DataFrame(1.0, index=index, columns=tags).rename_axis("timestamp")
    frame.to_csv(root / "snapshots/wide.csv", date_format="%Y-%m-%dT%H:%M:%SZ")
    assert estimate_rows(root / "snapshots/wide.csv", "wide.csv").rows == 30
    part = load_site(root, start="2026-01-01T00:10Z", end="2026-01-01T00:19Z")
    assert part.snapshots.shape == (10, FIVE_THOUSAND)
    assert part.snapshots.notna().all().all()
