"""Work orders: the findings of a review turned into field checks, grouped by substation
and device, as rows (CSV) and as the items of the printed checklist.

A finding with scope ``device`` (one fault behind every channel of a device, such as CT
polarity reversing both P and Q) becomes one group of checks listing all its tags; every other
finding is a group of its own. Point-list columns (``rtu``, ``channel``, ``ct_ratio``,
``vt_ratio``, ``quantity``, ``unit``, ``accuracy_pct``…) fill in what the finding row lacks.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from calibra.diagnosis.findings import MODEL_KINDS, RTU_KINDS
from calibra.ledger.states import OPEN_STATES
from calibra.reports._values import number, text
from calibra.reports.checklist import FINDING_LABELS, checklist_items
from calibra.reports.spreadsheet import write_safe_csv

#: Columns of the work-order CSV, one row per check; the last four are left for the crew.
WORK_ORDER_COLUMNS = [
    "site", "substation", "rtu", "channel", "device", "tags", "finding", "factor", "offset",
    "evidence", "check", "as_found", "as_left", "initials", "date",
]
REQUIRED_FINDING_COLUMNS = ["tag", "device", "substation", "finding", "evidence"]
_FROM_POINTS = ["rtu", "channel", "ct_ratio", "vt_ratio", "quantity", "element", "end", "unit",
                "accuracy_pct"]


@dataclass
class CheckGroup:
    """One finding (or one device-wide finding over several tags) and its checks."""

    substation: str
    device: str
    rtu: str
    channels: list[str]
    tags: list[str]
    finding: str
    evidence: list[str]
    factor: float | None
    offset: float | None
    checks: list[str] = field(default_factory=list)

    @property
    def label(self) -> str:
        return FINDING_LABELS.get(self.finding, self.finding)


def _open(findings: pd.DataFrame) -> pd.DataFrame:
    if "state" not in findings.columns:
        return findings
    return findings[findings["state"].isin(OPEN_STATES)]


def needing_field_work(findings: pd.DataFrame) -> pd.DataFrame:
    """The meter findings a crew still has to look at: all of them, or, when the frame carries
    the ledger's ``state``, those new, confirmed or only corrected in software. Findings about
    an RTU (its clock) are for the RTU/SCADA engineer: :func:`needing_rtu_work`; those about
    the network model for its owner (:mod:`calibra.reports.model_sheet`)."""
    elsewhere = findings["finding"].isin((*RTU_KINDS, *MODEL_KINDS))
    return _open(findings[~elsewhere] if elsewhere.any() else findings)


def needing_rtu_work(findings: pd.DataFrame) -> pd.DataFrame:
    """The open findings about an RTU rather than a meter, for the RTU/SCADA engineer."""
    return _open(findings[findings["finding"].isin(RTU_KINDS)])


def check_groups(findings: pd.DataFrame, points: pd.DataFrame | None) -> list[CheckGroup]:
    """Groups of checks, sorted by substation, RTU, device and tag."""
    missing = [c for c in REQUIRED_FINDING_COLUMNS if c not in findings.columns]
    if missing:
        raise ValueError(f"findings lack the column(s) {', '.join(missing)}")
    groups: dict[tuple, CheckGroup] = {}
    for _, finding in findings.iterrows():
        row = _with_point(finding.to_dict(), points)
        device_wide = text(row, "scope") == "device"
        key = (text(row, "substation"), text(row, "device"), text(row, "finding"),
               "" if device_wide else text(row, "tag"))
        group = groups.get(key)
        if group is None:
            group = groups[key] = CheckGroup(
                substation=key[0], device=key[1], rtu=text(row, "rtu"), channels=[], tags=[],
                finding=key[2], evidence=[], factor=number(row, "factor"),
                offset=number(row, "offset"), checks=checklist_items(row))
        _add(group.tags, text(row, "tag"))
        _add(group.channels, text(row, "channel"))
        _add(group.evidence, text(row, "evidence"))
    return sorted(groups.values(), key=lambda g: (g.substation, g.rtu, g.device, g.tags))


def _with_point(row: dict, points: pd.DataFrame | None) -> dict:
    tag = text(row, "tag")
    if points is None or tag not in points.index:
        return row
    point = points.loc[tag]
    for name in _FROM_POINTS:
        if not text(row, name) and name in point.index:
            row[name] = point[name]
    return row


def _add(items: list[str], value: str) -> None:
    if value and value not in items:
        items.append(value)


def work_order_rows(findings: pd.DataFrame, points: pd.DataFrame | None,
                    site_name: str = "") -> pd.DataFrame:
    """One row per check, with the :data:`WORK_ORDER_COLUMNS` (crew boxes left empty)."""
    records = []
    for g in check_groups(findings, points):
        for check in g.checks:
            records.append({
                "site": site_name, "substation": g.substation, "rtu": g.rtu,
                "channel": ", ".join(g.channels), "device": g.device, "tags": ", ".join(g.tags),
                "finding": g.label, "factor": g.factor, "offset": g.offset,
                "evidence": "; ".join(g.evidence), "check": check,
                "as_found": "", "as_left": "", "initials": "", "date": "",
            })
    return pd.DataFrame(records, columns=WORK_ORDER_COLUMNS)


def write_work_orders_csv(findings: pd.DataFrame, points: pd.DataFrame | None,
                          path: str | Path, *, site_name: str = "") -> Path:
    """Write the work-order rows as a CSV no spreadsheet can execute (see
    :mod:`calibra.reports.spreadsheet`); numbers stay numbers."""
    rows = work_order_rows(findings, points, site_name)
    records = ([None if pd.isna(v) else v for v in r] for r in rows.itertuples(index=False))
    return write_safe_csv(path, WORK_ORDER_COLUMNS, records)
