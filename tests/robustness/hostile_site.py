"""Twelve hours of the invented Tarrowmere sample grid (with its seeded meter faults) whose
tags, devices, substations and site name are renamed to text that attacks spreadsheets, file
systems and HTML: formula triggers, path traversal, markup, quotes, tabs, line breaks,
reserved device names and non-ASCII letters."""

from __future__ import annotations

import csv
import re
from pathlib import Path

import pandas as pd
import pyarrow.parquet as pq

from calibra.simulate.sample_site import (
    START_LOCAL,
    TIMEZONE,
    sample_faults,
    sample_points,
    tarrowmere_case,
)
from calibra.simulate.telemetry import simulate_site
from calibra.simulate.writer import write_site

SITE_NAME = 'Tarrowmere <grid> & "Ölmühle" =1+1'
#: Formula triggers per OWASP's CSV-injection advice (from memory), plus file-system and
#: markup hazards; names used first go to the substations and points with faults.
SUBSTATIONS = [
    "<script>alert(1)</script>", "=cmd|' /C calc'!A0", 'The "Quoted" Yard & Co',
    "../../etc/cron.d", "CON", "Ölmühle Süd", "-2+3", "@SUM(A1:A9)", "Tab\there", "+1 Hill",
    "..", "C:\\Windows\\win.ini", "nul.txt", "＝HYPERLINK(1)", "/etc/passwd",
]
TAGS = ["=cmd|' /C calc'!T{k}", "-2+{k}", "@SUM({k})", "<b>{k}</b>", "a\tb{k}", "../../t{k}",
        'q"{k}"', "Ölmühle.{k}", "line\nbreak{k}", "\r=CR{k}", "{k}&amp;", "+{k}"]
DEVICES = ["=IED|{k}", "IED <{k}> & co", "-IED-{k}", "@IED{k}", "../IED{k}", "Éq.{k}"]
RTUS = ["=RTU|{k}", "@RTU {k}", "-RTU+{k}", "RTU <{k}>"]


def hostile(template: str, k: int) -> str:
    return template.format(k=k)


def _names(old: list[str], first: set[str], templates: list[str]) -> dict[str, str]:
    """Old → hostile name; the ``first`` names get the first templates (all distinct)."""
    order = sorted(dict.fromkeys(old), key=lambda name: name not in first)
    return {name: hostile(templates[k % len(templates)], k)
            + ("" if k < len(templates) or "{k}" in templates[k % len(templates)] else f" {k}")
            for k, name in enumerate(order)}


def rename_site(root: Path, faulty: set[str]) -> dict[str, dict[str, str]]:
    """Rename in place (consistently in buses.csv, points.csv, the snapshot columns and
    site.toml), the names of the ``faulty`` tags' substations, devices and RTUs first;
    returns the old → new maps."""
    buses = pd.read_csv(root / "network/buses.csv", dtype=str, keep_default_na=False)
    points = pd.read_csv(root / "points.csv", dtype=str, keep_default_na=False)
    bad = points[points["tag"].isin(faulty)]
    maps = {
        "substation": _names(sorted(buses["substation"]), set(bad["substation"]), SUBSTATIONS),
        "tag": _names(list(points["tag"]), faulty, TAGS),
        "device": _names(list(points["device"]), set(bad["device"]), DEVICES),
        "rtu": _names([r for r in points["rtu"] if r], set(bad["rtu"]), RTUS) | {"": ""},
    }
    buses["substation"] = buses["substation"].map(maps["substation"])
    for column, names in maps.items():
        points[column] = points[column].map(names)
    tags = maps["tag"]
    buses.to_csv(root / "network/buses.csv", index=False, quoting=csv.QUOTE_ALL)
    points.to_csv(root / "points.csv", index=False, quoting=csv.QUOTE_ALL)
    for path in (root / "snapshots").glob("*.parquet"):
        table = pq.read_table(path)
        pq.write_table(table.rename_columns([tags.get(n, n) for n in table.column_names]), path)
    toml = (root / "site.toml").read_text(encoding="utf-8")
    quoted = SITE_NAME.replace("\\", "\\\\").replace('"', '\\"')
    (root / "site.toml").write_text(re.sub(r'(?m)^name = .*$', f'name = "{quoted}"', toml),
                                    encoding="utf-8")
    return maps


def hostile_sample(root: Path) -> dict[str, dict[str, str]]:
    """Write the renamed twelve-hour sample site to ``root``: the first twelve hours of the
    sample week with the seeded faults present from its start (reversals, ratio errors,
    crossed points, offset, noise), so the review has findings in every report."""
    case = tarrowmere_case()
    points = sample_points(case, 7)
    faults = [f for f in sample_faults(points) if f.onset is None]
    sim = simulate_site(case, points, start=START_LOCAL, periods=720, timezone=TIMEZONE,
                        seed=7, faults=faults, outages=None)
    write_site(sim.site, root)
    return rename_site(root, {t for f in faults for t in f.tags})
