"""The printed field checklist of one substation, as HTML.

The HTML keeps to the subset Qt's rich-text engine lays out (tables, simple CSS) so
:func:`calibra.gui.qt_pdf.sheets_to_pdf` can print it page by page (no row split, see
:mod:`calibra.reports.sheet_pages`); any browser shows the whole sheet too. Every piece of user
data is escaped.
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import datetime
from html import escape
from itertools import groupby

import pandas as pd

from calibra.reports.safety import SAFETY_CAUTIONS
from calibra.reports.sheet_pages import DeviceSection, Sheet, ruled_table
from calibra.reports.work_orders import CheckGroup, check_groups

_STYLE = """
body { font-family: 'DejaVu Sans', 'Liberation Sans', Arial, sans-serif; font-size: 8.5pt; }
h1 { font-size: 15pt; margin-bottom: 2px; }
h2 { font-size: 10.5pt; margin-top: 16px; margin-bottom: 4px; }
th { background-color: #dfe5ea; text-align: left; }
td.finding { background-color: #f2f4f6; }
.safety { background-color: #fff3d6; }
.small { font-size: 7.5pt; color: #444444; }
"""

TimeLike = str | datetime | pd.Timestamp


def work_order_sheet(site_name: str, substation: str, findings: pd.DataFrame,
                     points: pd.DataFrame | None, generated_at: TimeLike,
                     period: Sequence[TimeLike] | None = None) -> Sheet:
    """One substation's field checklist as blocks (see :mod:`calibra.reports.sheet_pages`):
    header, safety cautions, one table per device with boxes for as-found, as-left, initials
    and date, and room for remarks."""
    subset = findings[findings["substation"].astype(str).str.strip() == str(substation).strip()]
    groups = check_groups(subset, points)
    if not groups:
        raise ValueError(f"no findings for substation {substation!r}")
    tags = list(dict.fromkeys(t for g in groups for t in g.tags))
    devices = [DeviceSection(_device_title(rtu, device), [_unit(g) for g in device_groups])
               for (rtu, device), device_groups in groupby(groups, key=lambda g: (g.rtu, g.device))]
    head = sheet_head(f"{site_name} — {substation}")
    opening = [f"<h1>Field checklist: {escape(str(substation))}</h1>"
               + _header(site_name, substation, generated_at, period, len(tags), len(devices)),
               _safety()]
    closing = ("<h2>Remarks</h2>" + ruled_table(padding=4) + "<tr><td>&nbsp;</td></tr>" * 4
               + "</table><p>Work done by (name, signature): ______________________________ "
               "Date: ______________</p>")
    return Sheet(str(substation), head, opening, devices, closing, tags)


def sheet_head(title: str) -> str:
    """The document head of a sheet (its title escaped, the sheets' style) and ``<body>``."""
    return "".join(["<html><head><meta charset=\"utf-8\"/>", f"<title>{escape(title)}</title>",
                    f"<style>{_STYLE}</style></head><body>"])


def work_order_html(site_name: str, substation: str, findings: pd.DataFrame,
                    points: pd.DataFrame | None, generated_at: TimeLike,
                    period: Sequence[TimeLike] | None = None) -> str:
    """One substation's field checklist as one HTML document (any browser shows it)."""
    return work_order_sheet(site_name, substation, findings, points, generated_at,
                            period).whole_html()


def work_order_sheets(site_name: str, findings: pd.DataFrame, points: pd.DataFrame | None,
                      generated_at: TimeLike,
                      period: Sequence[TimeLike] | None = None) -> dict[str, Sheet]:
    """The checklist of every substation with findings, keyed by substation (sorted)."""
    names = sorted({str(s).strip() for s in findings["substation"].dropna()} - {""})
    return {name: work_order_sheet(site_name, name, findings, points, generated_at, period)
            for name in names}


def work_order_pages(site_name: str, findings: pd.DataFrame, points: pd.DataFrame | None,
                     generated_at: TimeLike,
                     period: Sequence[TimeLike] | None = None) -> dict[str, str]:
    """The checklist of every substation with findings as HTML, keyed by substation."""
    return {name: sheet.whole_html() for name, sheet in
            work_order_sheets(site_name, findings, points, generated_at, period).items()}


def when(value: TimeLike | None, with_time: bool = True) -> str:
    """A time as the sheets print it (``2027-03-01 08:00 CET``), or "not given"."""
    if value is None:
        return "not given"
    ts = pd.Timestamp(value)
    text = f"{ts:%Y-%m-%d %H:%M}" if with_time else f"{ts:%Y-%m-%d}"
    return f"{text} {ts.tzname()}" if ts.tzinfo is not None and with_time else text


def _header(site_name: str, substation: str, generated_at: TimeLike,
            period: Sequence[TimeLike] | None, n_points: int, n_devices: int) -> str:
    if period is None:
        span = "not given"
    else:
        start, end = period
        span = f"{when(start)} to {when(end)}"
    cells = [("Site", site_name), ("Substation", substation), ("Review period", span),
             ("Prepared", when(generated_at)),
             ("Points to check", f"{n_points} on {n_devices} device"
                                 f"{'s' if n_devices != 1 else ''}")]
    rows = "".join(f"<tr><td><b>{escape(k)}</b></td><td>{escape(str(v))}</td></tr>"
                   for k, v in cells)
    return f"<table cellpadding=\"1\" cellspacing=\"0\">{rows}</table>"


def _safety() -> str:
    items = "".join(f"<li>{escape(c.text)} <i class=\"small\">({escape(c.sources)})</i></li>"
                    for c in SAFETY_CAUTIONS)
    return ("<h2>Safety: read before starting</h2>" + ruled_table('class="safety"', 4)
            + f"<tr><td><ul>{items}</ul></td></tr></table>")


def _device_title(rtu: str, device: str) -> str:
    return f"Device {device or '(not named)'}" + (f" · RTU {rtu}" if rtu else "")


def _unit(g: CheckGroup) -> list[str]:
    """A finding's heading row (tags, channel, finding, evidence) and one row per check with
    empty boxes: the rows kept together on one page."""
    where = escape(", ".join(g.tags))
    if g.channels:
        where += escape(f" · channel {', '.join(g.channels)}")
    rows = [f"<tr><td colspan=\"5\" class=\"finding\"><b>{where}: {escape(g.label)}"
            f"</b><br/><span class=\"small\">{escape('; '.join(g.evidence))}</span></td></tr>"]
    rows += [f"<tr><td>☐ {escape(check)}</td><td></td><td></td><td></td><td></td></tr>"
             for check in g.checks]
    return rows
