"""The RTU/SCADA engineer's sheet: findings about an RTU (its clock) or a tap changer (its
position indication, its model data, or its motion without telemetry), not about a meter.

A field crew's checklist is per substation and per device; an RTU whose points all read late
is a matter of the RTU's time synchronisation and configuration, so its findings go on a sheet
of their own (one block per RTU: the finding, its checks with boxes, the RTU's points) and a
CSV of their own, both with the same safety cautions as the crews' sheets and one more about
changing an RTU in service.
"""

from __future__ import annotations

from collections.abc import Sequence
from html import escape
from pathlib import Path

import pandas as pd

from calibra.diagnosis.findings import TAP_KINDS
from calibra.model.points import ANALOG_QUANTITIES
from calibra.reports._values import number, text
from calibra.reports.checklist import FINDING_LABELS, checklist_items
from calibra.reports.html import TimeLike, sheet_head, when
from calibra.reports.safety import SAFETY_CAUTIONS, Caution
from calibra.reports.sheet_pages import DeviceSection, Sheet, ruled_table
from calibra.reports.spreadsheet import write_safe_csv
from calibra.reports.tap_checks import TAP_CAUTION

#: The sheet's name (where a crew's sheet names its substation).
RTU_SHEET_TITLE = "RTU and SCADA checks"
#: Columns of the RTU work-order CSV, one row per check; the last four are left for the
#: engineer.
RTU_WORK_ORDER_COLUMNS = [
    "site", "rtu", "substation", "finding", "offset_s", "points", "evidence", "check",
    "as_found", "as_left", "initials", "date",
]
#: Printed on the RTU sheet after the crews' cautions.
RTU_CAUTION = Caution(
    "Changing an RTU's time or configuration in service can interrupt telemetry and "
    "control: agree the work with the control room first and follow the utility's change "
    "procedures; this check needs no control operation.",
    "employer's procedures")


def rtu_points(points: pd.DataFrame | None, rtu: str) -> list[str]:
    """The RTU's analog points in the point list (its channel order)."""
    if points is None or "rtu" not in points:
        return []
    mine = points[(points["rtu"].astype(str) == rtu)
                  & points["quantity"].isin(ANALOG_QUANTITIES)]
    return [str(t) for t in mine.index]


def _rtu_of(row) -> str:
    return text(row, "rtu") or text(row, "tag")


def _block_title(row) -> str:
    """The heading of a finding's block: the RTU, or the transformer of a tap finding."""
    if text(row, "finding") in TAP_KINDS:
        return f"Transformer {text(row, 'element')} tap changer"
    rtu = _rtu_of(row)
    return rtu if rtu.upper().startswith("RTU") else f"RTU {rtu}"


def _listed(row, points: pd.DataFrame | None) -> str:
    """The points the block lists: the RTU's analog points, or the tap-position point."""
    if text(row, "finding") in TAP_KINDS:
        tag = text(row, "tag")
        has_point = points is not None and tag in points.index
        return f"Tap-position point: {tag}" if has_point else "No tap-position point"
    rtu = _rtu_of(row)
    listed = rtu_points(points, rtu)
    return f"Points of {rtu} ({len(listed)}): {', '.join(listed) or 'none in the point list'}"


def rtu_sheet(site_name: str, findings: pd.DataFrame, points: pd.DataFrame | None,
              generated_at: TimeLike, period: Sequence[TimeLike] | None = None) -> Sheet:
    """The RTU/SCADA sheet of ``findings`` (all about RTUs) as blocks for the printer."""
    if findings.empty:
        raise ValueError("no RTU findings for the RTU sheet")
    devices, tags = [], []
    for _, row in findings.sort_values(["rtu", "tag"]).iterrows():
        title = _block_title(row)
        label = FINDING_LABELS.get(text(row, "finding"), text(row, "finding"))
        heading = (f"<tr><td colspan=\"5\" class=\"finding\"><b>{escape(title)}: "
                   f"{escape(label)}</b><br/><span class=\"small\">"
                   f"{escape(text(row, 'evidence'))}</span></td></tr>")
        checks = [f"<tr><td>☐ {escape(c)}</td><td></td><td></td><td></td><td></td></tr>"
                  for c in checklist_items(row)]
        names = (f"<tr><td colspan=\"5\" class=\"small\">{escape(_listed(row, points))}"
                 "</td></tr>")
        where = text(row, "substation")
        title += f" · substation {where}" if where else ""
        devices.append(DeviceSection(title, [[heading, *checks], [names]]))
        tags.append(text(row, "tag"))
    cautions = _cautions(findings)
    items = "".join(f"<li>{escape(c.text)} <i class=\"small\">({escape(c.sources)})</i></li>"
                    for c in cautions)
    opening = [
        f"<h1>{escape(RTU_SHEET_TITLE)}</h1>" + _header(site_name, generated_at, period,
                                                         len(devices),
                                                         bool(findings["finding"]
                                                              .isin(TAP_KINDS).any())),
        "<h2>Safety: read before starting</h2>" + ruled_table('class="safety"', 4)
        + f"<tr><td><ul>{items}</ul></td></tr></table>",
    ]
    closing = ("<h2>Remarks</h2>" + ruled_table(padding=4) + "<tr><td>&nbsp;</td></tr>" * 4
               + "</table><p>Checked by (name, signature): ______________________________ "
               "Date: ______________</p>")
    return Sheet(RTU_SHEET_TITLE, sheet_head(f"{site_name} — {RTU_SHEET_TITLE}"), opening,
                 devices, closing, tags)


def _cautions(findings: pd.DataFrame) -> tuple[Caution, ...]:
    """The crews' cautions, the RTU one, and the tap changer's when a tap finding is there."""
    taps = findings["finding"].isin(TAP_KINDS).any() if "finding" in findings else False
    return (*SAFETY_CAUTIONS, RTU_CAUTION, *((TAP_CAUTION,) if taps else ()))


def _header(site_name: str, generated_at: TimeLike, period: Sequence[TimeLike] | None,
            n_rtus: int, taps: bool = False) -> str:
    span = "not given" if period is None else f"{when(period[0])} to {when(period[1])}"
    cells = [("Site", site_name), ("For", "the RTU/SCADA engineer"
                                   + (" and the protection and control engineer" if taps
                                      else "")),
             ("Review period", span), ("Prepared", when(generated_at)),
             ("RTUs and tap changers to check" if taps else "RTUs to check", str(n_rtus))]
    rows = "".join(f"<tr><td><b>{escape(k)}</b></td><td>{escape(str(v))}</td></tr>"
                   for k, v in cells)
    return f"<table cellpadding=\"1\" cellspacing=\"0\">{rows}</table>"


def rtu_work_order_rows(findings: pd.DataFrame, points: pd.DataFrame | None,
                        site_name: str = "") -> pd.DataFrame:
    """One row per check of each RTU finding, with :data:`RTU_WORK_ORDER_COLUMNS`."""
    records = []
    for _, row in findings.iterrows():
        rtu = _rtu_of(row)
        tap = text(row, "finding") in TAP_KINDS
        # A tap finding's offset is in steps (its evidence says so), and its point is its own.
        listed = ([text(row, "tag")] if points is not None and text(row, "tag") in points.index
                  else []) if tap else rtu_points(points, rtu)
        for check in checklist_items(row):
            records.append({
                "site": site_name, "rtu": rtu, "substation": text(row, "substation"),
                "finding": FINDING_LABELS.get(text(row, "finding"), text(row, "finding")),
                "offset_s": None if tap else number(row, "offset"),
                "points": ", ".join(listed),
                "evidence": text(row, "evidence"), "check": check,
                "as_found": "", "as_left": "", "initials": "", "date": "",
            })
    return pd.DataFrame(records, columns=RTU_WORK_ORDER_COLUMNS)


def write_rtu_work_orders_csv(findings: pd.DataFrame, points: pd.DataFrame | None,
                              path: str | Path, *, site_name: str = "") -> Path:
    """The RTU checks as a CSV no spreadsheet can execute, the safety cautions in its last
    rows (the file goes to people)."""
    rows = rtu_work_order_rows(findings, points, site_name)
    records = [[None if pd.isna(v) else v for v in r] for r in rows.itertuples(index=False)]
    blank = [None] * (len(RTU_WORK_ORDER_COLUMNS) - 1)
    for c in _cautions(findings):
        records.append([f"Safety: {c.text} ({c.sources})", *blank])
    return write_safe_csv(path, RTU_WORK_ORDER_COLUMNS, records)
