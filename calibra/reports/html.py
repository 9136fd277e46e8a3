"""The printed field checklist of one substation, as HTML.

The HTML keeps to the subset Qt's rich-text engine lays out (tables with rowspan, simple CSS)
so :func:`calibra.gui.qt_pdf.html_to_pdf` can print it; any browser shows it too. Every piece
of user data is escaped.
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import datetime
from html import escape
from itertools import groupby

import pandas as pd

from calibra.reports.safety import SAFETY_CAUTIONS
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


def _table(attributes: str = "", padding: int = 3) -> str:
    """Opening tag of a full-width ruled table."""
    return (f'<table width="100%" border="1" cellspacing="0" cellpadding="{padding}"'
            f'{" " + attributes if attributes else ""}>')


def work_order_html(site_name: str, substation: str, findings: pd.DataFrame,
                    points: pd.DataFrame | None, generated_at: TimeLike,
                    period: Sequence[TimeLike] | None = None) -> str:
    """One substation's field checklist: header, safety cautions, one table per device with
    boxes for as-found, as-left, initials and date, and room for remarks."""
    subset = findings[findings["substation"].astype(str).str.strip() == str(substation).strip()]
    groups = check_groups(subset, points)
    if not groups:
        raise ValueError(f"no findings for substation {substation!r}")
    parts = [
        "<html><head><meta charset=\"utf-8\"/>",
        f"<title>{escape(f'{site_name} — {substation}')}</title>",
        f"<style>{_STYLE}</style></head><body>",
        f"<h1>Field checklist: {escape(str(substation))}</h1>",
        _header(site_name, substation, generated_at, period,
                len({t for g in groups for t in g.tags}), len(groups)),
        _safety(),
    ]
    for (rtu, device), device_groups in groupby(groups, key=lambda g: (g.rtu, g.device)):
        parts.append(_device_table(rtu, device, list(device_groups)))
    parts.append(
        "<h2>Remarks</h2>" + _table(padding=4) + "<tr><td>&nbsp;</td></tr>" * 4 + "</table>"
        "<p>Work done by (name, signature): ______________________________ "
        "Date: ______________</p>")
    parts.append("</body></html>")
    return "\n".join(parts)


def work_order_pages(site_name: str, findings: pd.DataFrame, points: pd.DataFrame | None,
                     generated_at: TimeLike,
                     period: Sequence[TimeLike] | None = None) -> dict[str, str]:
    """The checklist of every substation with findings, keyed by substation (sorted)."""
    names = sorted({str(s).strip() for s in findings["substation"].dropna()} - {""})
    return {name: work_order_html(site_name, name, findings, points, generated_at, period)
            for name in names}


def _when(value: TimeLike | None, with_time: bool = True) -> str:
    if value is None:
        return "not given"
    ts = pd.Timestamp(value)
    text = f"{ts:%Y-%m-%d %H:%M}" if with_time else f"{ts:%Y-%m-%d}"
    return f"{text} {ts.tzname()}" if ts.tzinfo is not None and with_time else text


def _header(site_name: str, substation: str, generated_at: TimeLike,
            period: Sequence[TimeLike] | None, n_points: int, n_groups: int) -> str:
    if period is None:
        span = "not given"
    else:
        start, end = period
        span = f"{_when(start)} to {_when(end)}"
    cells = [("Site", site_name), ("Substation", substation), ("Review period", span),
             ("Prepared", _when(generated_at)),
             ("Points to check", f"{n_points} ({n_groups} check group"
                                 f"{'s' if n_groups != 1 else ''})")]
    rows = "".join(f"<tr><td><b>{escape(k)}</b></td><td>{escape(str(v))}</td></tr>"
                   for k, v in cells)
    return f"<table cellpadding=\"1\" cellspacing=\"0\">{rows}</table>"


def _safety() -> str:
    items = "".join(f"<li>{escape(c.text)} <i class=\"small\">({escape(c.sources)})</i></li>"
                    for c in SAFETY_CAUTIONS)
    return ("<h2>Safety: read before starting</h2>" + _table('class="safety"', 4)
            + f"<tr><td><ul>{items}</ul></td></tr></table>")


def _device_table(rtu: str, device: str, groups: list[CheckGroup]) -> str:
    """One device: per finding a heading row (tags, channel, finding, evidence) followed by
    one row per check with empty boxes; the column heads repeat on a new sheet."""
    title = f"Device {device or '(not named)'}" + (f" · RTU {rtu}" if rtu else "")
    head = ("<thead><tr><th width=\"52%\">Check</th><th width=\"16%\">As found</th>"
            "<th width=\"16%\">As left</th><th width=\"8%\">Initials</th>"
            "<th width=\"8%\">Date</th></tr></thead>")
    rows = []
    for g in groups:
        where = escape(", ".join(g.tags))
        if g.channels:
            where += escape(f" · channel {', '.join(g.channels)}")
        rows.append(f"<tr><td colspan=\"5\" class=\"finding\"><b>{where}: {escape(g.label)}"
                    f"</b><br/><span class=\"small\">{escape('; '.join(g.evidence))}</span>"
                    "</td></tr>")
        rows += [f"<tr><td>☐ {escape(check)}</td><td></td><td></td><td></td><td></td></tr>"
                 for check in g.checks]
    return (f"<h2>{escape(title)}</h2>" + _table('style="margin-bottom: 14px"')
            + f"{head}<tbody>{''.join(rows)}</tbody></table>")
