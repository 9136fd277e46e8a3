"""The sample site loads without a validation error and its planned outage and RTU
communication outage are reported as such (issue: sample site)."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from calibra.io import load_site, summarize
from calibra.model.availability import availability_lines, branch_outages, rtu_gaps

FOLDER = Path(__file__).resolve().parents[2] / "sample_site"


def test_outage_and_gaps_are_reported():
    site = load_site(FOLDER)
    assert site.problems == []
    outages = branch_outages(site)
    assert [o.what for o in outages] == ["HNW-MRG"]
    local = outages[0].start.tz_convert(site.timezone)
    assert (local.day_of_week, local.hour) == (1, 8)  # Tuesday 08:00 local, planned
    assert outages[0].end - outages[0].start == pd.Timedelta("6h") - pd.Timedelta("1min")
    gaps = rtu_gaps(site)
    assert [g.what for g in gaps] == ["RTU-BRN"]
    assert abs((gaps[0].end - gaps[0].start) - pd.Timedelta("3h")) <= pd.Timedelta("2min")
    lines = availability_lines(site)
    assert any("HNW-MRG" in line for line in lines) and any("RTU-BRN" in line for line in lines)
    s = summarize(site)
    assert 0 < s["missing_fraction"] < 0.01  # scattered values and the RTU outage
