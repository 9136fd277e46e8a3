"""Mutations of the snapshot times: UTC offsets, mixed zones, daylight-saving changes.

The expected UTC instants come from zoneinfo (the IANA tz database): the tests take real
instants, write them as the wall-clock times a historian in the site's zone would show, and
demand the loader gets the same instants back.
"""

from __future__ import annotations

from datetime import datetime, timedelta
from zoneinfo import ZoneInfo

import pandas as pd
from hypothesis import strategies as st

from calibra.model.site import Site
from tests.robustness.file_mutations import same_content
from tests.robustness.mutations import ANY, Mutation, table, with_table
from tests.robustness.small_site import SNAPSHOT_FILE, TIMEZONE

ZONE = ZoneInfo(TIMEZONE)
OTHER_ZONES = [ZoneInfo("UTC"), ZoneInfo("Asia/Kolkata"), ZoneInfo("Pacific/Chatham"),
               ZoneInfo("America/St_Johns"), ZoneInfo("Europe/Berlin")]


def offset_text(moment: datetime, style: str) -> str:
    """``moment`` (aware) as ISO 8601 text with its UTC offset, in one of several spellings."""
    if style == "Z":
        return moment.astimezone(ZoneInfo("UTC")).strftime("%Y-%m-%dT%H:%M:%SZ")
    text = moment.isoformat(sep="T" if style != "space" else " ")
    if style == "compact":  # +hhmm without the colon
        text = text[:-3] + text[-2:]
    return text


def changes(year: int) -> list[datetime]:
    """The UTC instants in ``year`` at which the site's UTC offset changes."""
    t = datetime(year, 1, 1, tzinfo=ZoneInfo("UTC"))
    found, before = [], t.astimezone(ZONE).utcoffset()
    while t.year == year:
        t += timedelta(minutes=15)
        now = t.astimezone(ZONE).utcoffset()
        if now != before:
            found.append(t)
        before = now
    return found


CHANGES = changes(2026)


@st.composite
def offsets(draw, files: dict[str, bytes], reference: Site) -> Mutation:
    """Every time written with a UTC offset (the site's, UTC, or another zone's), some
    perhaps left naive: the instants do not change."""
    t = table(files, SNAPSHOT_FILE)
    naive_share = draw(st.sampled_from([0.0, 0.0, 0.3]))
    mixed = False
    for k, moment in enumerate(reference.snapshots.index.to_pydatetime()):
        if naive_share and draw(st.floats(0, 1)) < naive_share:
            mixed = True
            continue
        zone = draw(st.sampled_from([ZONE, *OTHER_ZONES]))
        style = draw(st.sampled_from(["T", "space", "compact", "Z"]))
        t.rows[k][0] = offset_text(moment.astimezone(zone), style)
    all_naive = all(":" in r[0] and "+" not in r[0] and "Z" not in r[0]
                    and r[0].count("-") == 2 for r in t.rows)
    report = [(SNAPSHOT_FILE, ANY, "timestamp")] if mixed and not all_naive else []
    return Mutation("times with UTC offsets" + (" and some naive" if mixed else ""),
                    with_table(files, SNAPSHOT_FILE, t), must_report=report, must_load=True,
                    expect=same_content(reference, quiet=not report))


@st.composite
def daylight_saving(draw, files: dict[str, bytes], reference: Site) -> Mutation:
    """The period moved across a change of the site's UTC offset, written as naive local
    times; optionally with rows at local times that do not exist, or a repeated hour that is
    given only once (so the file cannot say which is meant)."""
    t = table(files, SNAPSHOT_FILE)
    n = len(t.rows)
    change = draw(st.sampled_from(CHANGES))
    spring = (change.astimezone(ZONE).utcoffset()
              > (change - timedelta(minutes=1)).astimezone(ZONE).utcoffset())
    step = draw(st.sampled_from([timedelta(minutes=5), timedelta(minutes=15)]))
    start = change - step * draw(st.integers(6, n - 6))
    moments = [start + k * step for k in range(n)]
    for row, moment in zip(t.rows, moments, strict=True):
        row[0] = moment.astimezone(ZONE).strftime("%Y-%m-%d %H:%M:%S")
    utc = pd.DatetimeIndex(moments).tz_convert("UTC").as_unit("ns").rename("timestamp")
    keep = list(range(n))
    report = [] if spring else [(SNAPSHOT_FILE, ANY, "timestamp")]
    season = "spring" if spring else "autumn"
    label = f"times across the {season} change at {change:%Y-%m-%d %H:%M}Z"
    twist = draw(st.sampled_from(["none", "gap_rows" if spring else "once_only"]))
    if twist == "gap_rows":
        wall = change.astimezone(ZONE).replace(tzinfo=None) - timedelta(minutes=30)
        at = sorted(draw(st.sets(st.integers(0, n), min_size=1, max_size=3)), reverse=True)
        for k in at:  # a row at a local time that the change skips
            t.rows.insert(k, [wall.strftime("%Y-%m-%d %H:%M:%S"), *t.rows[min(k, n - 1)][1:]])
        rows = sorted(k + 2 + sum(j < k for j in at) for k in at)
        report = [(SNAPSHOT_FILE, r, "timestamp") for r in rows]
        label += f", rows {rows} in the skipped hour"
    elif twist == "once_only":
        first_pass = [k for k, m in enumerate(moments)
                      if m < change and m + timedelta(hours=1) >= change]
        second_pass = {k for k, m in enumerate(moments)
                       if change <= m < change + timedelta(hours=1)}
        if first_pass and second_pass:
            t.rows = [r for k, r in enumerate(t.rows) if k not in second_pass]
            keep = [k for k in range(n) if k not in second_pass and k not in first_pass]
            report = [(SNAPSHOT_FILE, k + 2, "timestamp") for k in first_pass]
            label += ", repeated hour given once"
    return Mutation(label, with_table(files, SNAPSHOT_FILE, t), must_report=report,
                    must_load=True,
                    expect=same_content(reference, values_of=keep, times=utc[keep]))
