"""Long historian exports (tag, time, value, quality) read as the same snapshots as a wide table.

Outside references: the quality-code tests cite the OPC DA quality byte, the OPC UA Part 4
StatusCode severity bits and IEC 61850-7-3 quality, all from memory as listed in
../shared/REFERENCES.md ([M]); the alignment rule is checked against a plain loop written
here from the rule's text (common practice of historians queried at fixed times, no source).
"""

from __future__ import annotations

import gzip
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from calibra.io import load_site
from calibra.io.quality import Source, Validity, classify
from calibra.io.site_folder import open_history
from calibra.model.site import SiteLoadError
from tests.io.site_builder import SITE_TOML, find, problems_of

Q, B, G = Validity.QUESTIONABLE, Validity.BAD, Validity.GOOD
P = Source.PROCESS


def to_long(wide: pd.DataFrame, quality: str | None = "good", seed: int = 3) -> pd.DataFrame:
    """A wide frame as a long export: one row per present value, rows shuffled."""
    out = wide.stack(future_stack=True).dropna().rename("value").reset_index()
    out.columns = ["time", "tag", "value"]
    out["time"] = out["time"].dt.strftime("%Y-%m-%dT%H:%M:%SZ")
    if quality is not None:
        out["quality"] = quality
    return out.sample(frac=1, random_state=seed).reset_index(drop=True)


def write_parts(folder: Path, table: pd.DataFrame, names: list[str]) -> None:
    """``table`` cut into len(names) files; the suffix of each name chooses the format."""
    (folder / "snapshots").mkdir(parents=True, exist_ok=True)
    for part, name in zip(np.array_split(np.arange(len(table)), len(names)), names,
                          strict=True):
        rows = table.iloc[part]
        path = folder / "snapshots" / name
        if name.endswith(".parquet"):
            rows.to_parquet(path, index=False, row_group_size=max(len(rows) // 3, 1))
        elif name.endswith(".gz"):
            path.write_bytes(gzip.compress(rows.to_csv(index=False).encode()))
        else:
            rows.to_csv(path, index=False)


@pytest.fixture
def wide_and_long(files, tmp_path):
    """The invented site's snapshots loaded wide, and a folder holding them as long exports
    (shuffled, CSV + CSV.gz + Parquet)."""
    wide = load_site(files.write(tmp_path / "wide"))
    files.snapshots = {}
    folder = files.write(tmp_path / "long")
    return wide, folder


# ----------------------------------------------------------------------------- vocabularies
def test_opc_da_quality_byte():
    # OPC DA quality byte [M, REFERENCES.md]: bits 7-6 11 good, 01 uncertain, 00 bad;
    # 216 = 0xD8 good with local override; 8 not connected and 24 comm failure are bad.
    assert classify("192") == (G, P) and classify("0xC0") == (G, P)
    assert classify("193") == (G, P)  # limit bits 1-0 do not change the quality
    assert classify("216") == (G, Source.OVERRIDE)
    assert all(classify(str(v)) == (Q, P) for v in (64, 68, 88, 127))
    assert all(classify(str(v)) == (B, P) for v in (0, 8, 24, 63))


def test_opc_ua_status_code_severity():
    # OPC UA Part 4 StatusCode [M, REFERENCES.md]: severity bits 31-30 00 Good,
    # 01 Uncertain (0x40000000), 10 Bad (0x80000000).
    assert classify("0x00000000") == (G, P)
    assert classify("0x40000000") == (Q, P) and classify(str(0x40000000)) == (Q, P)
    assert classify("0x80000000") == (B, P) and classify(str(0x80340000)) == (B, P)
    assert classify("0x408F0000") == (Q, P)
    assert classify("0", numeric="opc-ua") == (G, P)  # Good = 0 when the site says so
    assert classify(str(2**32)) is None


def test_iec_61850_7_3_quality_words():
    # IEC 61850-7-3 quality [M, REFERENCES.md]: validity good / invalid / reserved /
    # questionable; source process / substituted; detail quality such as oldData.
    assert classify("good") == (G, P) and classify("Invalid") == (B, P)
    assert classify("questionable") == (Q, P) and classify("reserved") == (B, P)
    assert classify("substituted") == (G, Source.SUBSTITUTED)
    assert classify("good|substituted") == (G, Source.SUBSTITUTED)
    assert classify("questionable|oldData") == (Q, P)
    assert classify("invalid + substituted") == (B, Source.SUBSTITUTED)
    assert classify("manual|substituted") is None  # two sources at once


def test_plain_words_and_unknown_codes():
    # The plain words are common practice, no source.
    assert [classify(w) for w in ("ok", "valid", "uncertain", "suspect", "bad")] == [
        (G, P), (G, P), (Q, P), (Q, P), (B, P)]
    assert classify("manual") == (G, Source.MANUAL)
    assert classify("OVERRIDE") == (G, Source.OVERRIDE)
    assert classify("") == (G, P)
    assert classify("XYZ") is None and classify("12.5") is None


# ----------------------------------------------------------------------------- equivalence
def test_long_export_in_three_formats_equals_the_wide_table(wide_and_long):
    wide, folder = wide_and_long
    long = to_long(wide.snapshots)
    long["quality"] = np.resize(["good", "192", "0x00000000", "ok", "valid"], len(long))
    write_parts(folder, long, ["a.csv", "b.csv.gz", "c.parquet"])
    site = load_site(folder)
    pd.testing.assert_frame_equal(site.snapshots, wide.snapshots)
    assert not [p for p in site.problems if "marked" in p.message or "held" in p.message]


def test_bad_values_are_missing_questionable_ones_used(wide_and_long):
    wide, folder = wide_and_long
    long = to_long(wide.snapshots)
    bad = (long["tag"] == "FNH.V") & (long["time"] <= "2024-03-04T09:01:00Z")
    questionable = long["tag"] == "TLR.T1.I"
    long.loc[bad, "quality"] = ["24", "invalid"]  # OPC DA comm failure; IEC 61850 invalid
    long.loc[questionable, "quality"] = "0x40000000"
    write_parts(folder, long, ["a.csv", "b.parquet"])
    site = load_site(folder)
    expected = wide.snapshots.copy()
    expected.loc[expected.index <= pd.Timestamp("2024-03-04 09:01", tz="UTC"), "FNH.V"] = np.nan
    pd.testing.assert_frame_equal(site.snapshots, expected)
    marked = [p for p in site.problems if "marked bad" in p.message]
    assert len(marked) == 1 and marked[0].count == 2 and "'FNH.V'" in marked[0].message
    assert marked[0].column == "quality" and marked[0].row is not None
    doubt = [p for p in site.problems if "questionable" in p.message]
    assert len(doubt) == 1 and doubt[0].count == 4 and doubt[0].column == "quality"
    assert "'TLR.T1.I'" in doubt[0].message


def test_manual_values_are_reported_with_their_period_in_the_site_zone(wide_and_long):
    wide, folder = wide_and_long
    long = to_long(wide.snapshots)
    manual = (long["tag"] == "PLM.LOAD.P") & (long["time"] >= "2024-03-04T09:01:00Z")
    long.loc[manual, "quality"] = "manual"
    write_parts(folder, long, ["a.csv"])
    site = load_site(folder)
    pd.testing.assert_frame_equal(site.snapshots, wide.snapshots)
    # Europe/Berlin is CET (UTC+1) in March 2024 before the last Sunday (IANA database).
    hit = [p for p in site.problems if "'PLM.LOAD.P'" in p.message][0]
    assert hit.column == "quality"
    assert "manual value from Mon 2024-03-04 10:01 CET to Mon 2024-03-04 10:03 CET" in (
        hit.message) and hit.count == 3


def test_a_site_maps_its_own_codes(wide_and_long):
    wide, folder = wide_and_long
    (folder / "site.toml").write_text(SITE_TOML + '\n[snapshots]\ninterval = "1min"\n'
                                      '[snapshots.quality]\n"A" = "good"\n"X" = "bad"\n')
    long = to_long(wide.snapshots, quality="A")
    long.loc[long["tag"] == "FNH.TLR1.Q", "quality"] = "X"
    write_parts(folder, long, ["a.csv"])
    site = load_site(folder)
    expected = wide.snapshots.copy()
    expected["FNH.TLR1.Q"] = np.nan
    pd.testing.assert_frame_equal(site.snapshots, expected, check_like=False)
    assert not [p for p in site.problems if "grid" in p.message]  # the interval was given


# ----------------------------------------------------------------------------- the grid rule
def aligned_by_loop(samples: list[tuple[pd.Timestamp, float, bool]], grid: pd.DatetimeIndex,
                    max_age: pd.Timedelta) -> list[float]:
    """The documented rule written as a plain loop: the latest sample at or before g,
    younger than max_age, usable."""
    out = []
    for g in grid:
        before = [s for s in samples if s[0] <= g]
        if not before:
            out.append(np.nan)
            continue
        t, value, good = max(before, key=lambda s: s[0])
        out.append(value if good and g - t < max_age else np.nan)
    return out


def test_irregular_times_are_aligned_by_the_rule(files, tmp_path):
    files.toml = SITE_TOML + '\n[snapshots]\ninterval = "1min"\nmax_age = "90s"\n'
    files.snapshots = {}
    folder = files.write(tmp_path)
    rng = np.random.default_rng(5)
    start = pd.Timestamp("2024-03-04 09:00", tz="UTC")
    rows, truth = [], {}
    for tag in ("FNH.TLR1.P", "FNH.V"):
        samples = []
        for k in range(30):
            if 10 <= k < 14 and tag == "FNH.V":
                continue  # a gap of five minutes, longer than max_age
            t = start + pd.Timedelta(minutes=k) + pd.Timedelta(seconds=float(rng.uniform(1, 59)))
            good = k != 20
            samples.append((t.floor("s"), 100.0 + k, good))
            rows.append([tag, f"{t.floor('s'):%Y-%m-%dT%H:%M:%SZ}", 100.0 + k,
                         "good" if good else "bad"])
        truth[tag] = samples
    table = pd.DataFrame(rows, columns=["point", "time", "value", "status"])
    write_parts(folder, table.sample(frac=1, random_state=2), ["x.csv", "y.parquet"])
    site = load_site(folder)
    grid = site.snapshots.index
    assert grid[0] == start + pd.Timedelta(minutes=1)  # no sample at or before 09:00
    assert (np.diff(grid.asi8) % 60_000_000_000 == 0).all()
    for tag, samples in truth.items():
        want = aligned_by_loop(samples, grid, pd.Timedelta("90s"))
        np.testing.assert_array_equal(site.snapshots[tag].to_numpy(), want)
    assert site.snapshots["FNH.V"].isna().sum() >= 4  # the gap is not bridged
    held = [p for p in site.problems if "held" in p.message and p.column == "FNH.V"]
    assert held and held[0].count == site.snapshots["FNH.V"].notna().sum()


def test_repeated_sample_later_file_wins(wide_and_long):
    wide, folder = wide_and_long
    long = to_long(wide.snapshots)
    again = long[long["tag"] == "FNH.TLR1.P"].copy()
    again["value"] = again["value"] + 1.0
    write_parts(folder, long, ["a.csv"])
    again.to_csv(folder / "snapshots" / "b.csv", index=False)
    site = load_site(folder)
    expected = wide.snapshots.copy()
    expected["FNH.TLR1.P"] += 1.0
    pd.testing.assert_frame_equal(site.snapshots, expected)
    hit = [p for p in site.problems if "repeat the time" in p.message]
    assert hit[0].file == "snapshots/b.csv" and hit[0].count == 4


def test_unknown_tags_are_counted(wide_and_long):
    wide, folder = wide_and_long
    long = to_long(wide.snapshots)
    long.loc[long["tag"] == "FNH.V", "tag"] = "FNH.V2"
    write_parts(folder, long, ["a.csv"])
    hit = [p for p in problems_of(folder) if p.column == "FNH.V2"]
    assert hit and hit[0].count == 4 and "not a tag of the point list" in hit[0].message


# ----------------------------------------------------------------------------- bad input
def test_bad_time_value_and_code_name_file_row_and_column(wide_and_long):
    wide, folder = wide_and_long
    long = to_long(wide.snapshots).astype({"value": object})
    long.loc[3, "time"] = "yesterday"
    long.loc[5, "value"] = "ERR"
    long.loc[7, "quality"] = "Q17"
    write_parts(folder, long, ["a.csv"])
    problems = problems_of(folder)
    find(problems, "snapshots/a.csv", 5, "time", "warning")
    value = find(problems, "snapshots/a.csv", 7, "value", "warning")
    assert "'ERR'" in value.message and f"'{long.loc[5, 'tag']}'" in value.message
    code = find(problems, "snapshots/a.csv", 9, "quality", "warning")
    assert "'Q17'" in code.message and "[snapshots.quality]" in code.message


def test_bad_snapshot_settings_are_errors_with_their_line(files, tmp_path):
    files.toml = SITE_TOML + '\n[snapshots]\ninterval = "often"\n'
    problem = find(problems_of(files.write(tmp_path)), "site.toml", 9, "interval")
    assert "duration" in problem.message


# ----------------------------------------------------------------------------- periods, memory
def test_period_and_day_by_day_reading_equal_the_wide_table(wide_and_long):
    wide, folder = wide_and_long
    write_parts(folder, to_long(wide.snapshots), ["a.csv", "b.parquet"])
    start, end = "2024-03-04 10:01", "2024-03-04 10:02"
    part = load_site(folder, start=start, end=end)
    wide_part = load_site(wide.path, start=start, end=end)
    pd.testing.assert_frame_equal(part.snapshots, wide_part.snapshots)
    # samples read before the period (for max_age) are not reported as unused
    assert not [p for p in part.problems if "not used" in p.message]
    history = open_history(folder)
    assert history.times().equals(wide.snapshots.index)
    pd.testing.assert_frame_equal(history.load(start, end).snapshots, wide_part.snapshots)


def test_memory_limit_applies_to_the_aligned_table(wide_and_long):
    wide, folder = wide_and_long
    write_parts(folder, to_long(wide.snapshots), ["a.csv"])
    with pytest.raises(SiteLoadError) as caught:
        load_site(folder, memory_limit=100)
    assert any("more than the limit" in p.message for p in caught.value.problems)


# ----------------------------------------------------------------------------- wide tables
def test_wide_table_quality_columns(files, tmp_path):
    wide = load_site(files.write(tmp_path / "plain")).snapshots
    table = files.snapshots["week.csv"]
    table.add_column("FNH.V:quality", "192")
    table.set(3, "FNH.V:quality", "0")  # OPC DA byte 0: bad [M, REFERENCES.md]
    table.add_column("PLM.LOAD.P:quality", "good")
    table.set(4, "PLM.LOAD.P:quality", "good|substituted")  # IEC 61850-7-3 source [M]
    table.set(5, "PLM.LOAD.P:quality", "uncertain")
    table.add_column("NOPE:quality", "good")
    site = load_site(files.write(tmp_path / "marked"))
    expected = wide.copy()
    expected.iloc[1, expected.columns.get_loc("FNH.V")] = np.nan
    pd.testing.assert_frame_equal(site.snapshots, expected)
    bad = find(site.problems, "snapshots/week.csv", 3, "FNH.V:quality", "warning")
    assert "marked bad" in bad.message
    sub = find(site.problems, "snapshots/week.csv", 4, "PLM.LOAD.P", "warning")
    assert "substituted value at Mon 2024-03-04 10:02 CET" in sub.message
    find(site.problems, "snapshots/week.csv", 5, "PLM.LOAD.P:quality", "warning")
    find(site.problems, "snapshots/week.csv", 1, "NOPE:quality", "warning")


# ----------------------------------------------------------------------------- the sample site
SAMPLE = Path(__file__).resolve().parents[2] / "sample_site"


@pytest.fixture(scope="module")
def sample_wide():
    from calibra.diagnosis.findings import findings_table
    from calibra.diagnosis.review import review_site

    site = load_site(SAMPLE)
    return site, findings_table(review_site(site).findings)


def _sample_long_folder(root: Path, long: pd.DataFrame) -> Path:
    import shutil

    shutil.copytree(SAMPLE, root, ignore=shutil.ignore_patterns("snapshots", "*.sqlite"))
    write_parts(root, long, ["p1.csv", "p2.csv.gz", "p3.parquet", "p4.parquet"])
    return root


def test_sample_week_as_long_export_gives_the_same_frame_and_findings(sample_wide, tmp_path):
    from calibra.diagnosis.findings import findings_table
    from calibra.diagnosis.review import review_site

    site, findings = sample_wide
    long = to_long(site.snapshots, seed=11)
    # Codes of every vocabulary that mean "use the value": OPC DA 192, OPC UA Good,
    # IEC 61850-7-3 good and good|substituted [M, REFERENCES.md]; some questionable.
    long["quality"] = np.resize(["192", "0x00000000", "good", "ok", "good|substituted",
                                 "uncertain", "0x40000000", "68"], len(long))
    folder = _sample_long_folder(tmp_path / "long", long)
    long_site = load_site(folder)
    pd.testing.assert_frame_equal(long_site.snapshots, site.snapshots)
    pd.testing.assert_frame_equal(findings_table(review_site(long_site).findings), findings)


def test_sample_week_with_bad_values_gives_the_same_findings(sample_wide, tmp_path):
    from calibra.diagnosis.findings import findings_table
    from calibra.diagnosis.review import review_site

    site, findings = sample_wide
    long = to_long(site.snapshots, seed=12)
    rng = np.random.default_rng(4)
    bad = rng.random(len(long)) < 0.002
    long.loc[bad, "quality"] = np.resize(["bad", "24", "0x80000000", "invalid"], int(bad.sum()))
    folder = _sample_long_folder(tmp_path / "long", long)
    long_site = load_site(folder)
    expected = site.snapshots.copy()
    marked = long[bad]
    rows = expected.index.get_indexer(pd.to_datetime(marked["time"], utc=True))
    cols = expected.columns.get_indexer(marked["tag"])
    values = expected.to_numpy(copy=True)
    values[rows, cols] = np.nan
    expected.loc[:, :] = values
    pd.testing.assert_frame_equal(long_site.snapshots, expected)
    again = findings_table(review_site(long_site).findings)
    assert list(zip(again["tag"], again["finding"], strict=True)) == list(
        zip(findings["tag"], findings["finding"], strict=True))


def test_the_documented_examples(files, tmp_path):
    """The [snapshots] table and the long export shown in sample_site/README.md, read by the
    rule written there (09:01: both samples younger than one minute; 09:02: FNH.V's latest
    sample is bad, FNH.TLR1.P's is 80 s old)."""
    import re

    text = (SAMPLE / "README.md").read_text(encoding="utf-8")
    blocks = re.findall(r"```text\n(.*?)```", text, re.DOTALL)
    settings = next(b for b in blocks if b.startswith("[snapshots]"))
    export = next(b for b in blocks if b.startswith("point,time,value"))
    files.toml = SITE_TOML + "\n" + settings
    assert not [p for p in problems_of(files.write(tmp_path / "toml")) if p.file == "site.toml"]
    files.toml = SITE_TOML
    files.snapshots = {"export.csv": export}
    site = load_site(files.write(tmp_path / "long"))
    frame = site.snapshots[["FNH.V", "FNH.TLR1.P"]]
    assert list(frame.index) == [pd.Timestamp("2024-03-04 09:01", tz="UTC"),
                                 pd.Timestamp("2024-03-04 09:02", tz="UTC")]
    np.testing.assert_array_equal(frame.to_numpy(), [[133.1, 61.2], [np.nan, np.nan]])


def test_malformed_long_csv_files(files, tmp_path):
    """Rows with extra values are errors with their row; semicolons with decimal commas are
    read with a warning; a header alone is reported (as for wide tables; common practice,
    no source)."""
    files.snapshots = {"ragged.csv": "tag,time,value\nFNH.V,2024-03-04 10:00,1,2\n"}
    problem = find(problems_of(files.write(tmp_path / "a")), "snapshots/ragged.csv", 2, None)
    assert "more values than the 3 columns" in problem.message
    files.snapshots = {"semi.csv": "tag;time;value\nFNH.V;2024-03-04 10:00;133,5\n"
                                   "FNH.V;2024-03-04 10:01;133,25\n"}
    site = load_site(files.write(tmp_path / "b"))
    assert site.snapshots["FNH.V"].tolist() == [133.5, 133.25]
    assert any("decimal commas" in p.message for p in site.problems)
    files.snapshots = {"empty.csv": "tag,time,value\n"}
    problems = problems_of(files.write(tmp_path / "c"))
    assert "header but no data rows" in find(problems, "snapshots/empty.csv", None, None,
                                             "warning").message


def test_parquet_row_groups_outside_the_period_are_not_read(wide_and_long):
    import pyarrow.parquet as pq

    from calibra.io.long_table import _group_outside

    wide, folder = wide_and_long
    long = to_long(wide.snapshots).sort_values("time")
    long["time"] = pd.to_datetime(long["time"], utc=True)
    path = folder / "snapshots" / "sorted.parquet"
    long.to_parquet(path, index=False, row_group_size=7)  # one minute per group
    start, end = (pd.Timestamp(t, tz="UTC") for t in ("2024-03-04 09:02", "2024-03-04 09:03"))
    parquet = pq.ParquetFile(path)
    skipped = [_group_outside(parquet, g, 0, (start - pd.Timedelta("1min"), end), "UTC")
               for g in range(parquet.num_row_groups)]
    assert skipped == [True, False, False, False]  # 09:01 UTC is read for max_age
    skipped = [_group_outside(parquet, g, 0, (start, end), "UTC")
               for g in range(parquet.num_row_groups)]
    assert skipped == [True, True, False, False]
    part = load_site(folder, start="2024-03-04 10:02", end="2024-03-04 10:03")
    pd.testing.assert_frame_equal(
        part.snapshots, load_site(wide.path, start="2024-03-04 10:02",
                                  end="2024-03-04 10:03").snapshots)


def test_no_snapshot_after_the_latest_sample(files, tmp_path):
    # The grid rule (sample_site/README.md): a long max_age (points stored by exception) holds
    # values forward, but not past the grid time the latest sample serves first; otherwise the
    # last snapshots would hold no fresh sample at all.
    files.toml = SITE_TOML + '\n[snapshots]\ninterval = "1min"\nmax_age = "15min"\n'
    files.snapshots = {"long.csv": "point,time,value,quality\n"
                       "FNH.V,2024-03-04T09:00:00Z,133.1,good\n"
                       "FNH.V,2024-03-04T09:01:00Z,133.2,good\n"
                       "FNH.TLR1.P,2024-03-04T09:00:00Z,61.0,good\n"
                       "FNH.TLR1.P,2024-03-04T09:02:20Z,61.5,good\n"}
    site = load_site(files.write(tmp_path))
    grid = site.snapshots.index
    assert list(grid) == list(pd.date_range("2024-03-04 09:00", "2024-03-04 09:03", freq="1min",
                                            tz="UTC"))
    assert site.snapshots["FNH.V"].tolist() == [133.1, 133.2, 133.2, 133.2]  # held < 15 min
    assert site.snapshots["FNH.TLR1.P"].tolist() == [61.0, 61.0, 61.0, 61.5]
