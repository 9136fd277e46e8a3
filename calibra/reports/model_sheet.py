"""The network model's owner's sheet: findings about a parameter of the model, not a meter.

A wrong reactance, tap or shunt in the network model makes the meters around it disagree with
each other; the review names the parameter and its estimate, and the meters it explains are not
put on the field crew's checklist. These findings go to whoever owns the network model, on a
sheet of their own (one block per parameter: the model's value, the estimate ± its standard
deviation, the meters it explains, whether the metering tells it from meter errors, what to
check) and a CSV of their own, ``model_work_orders.csv``. Advisory, with the crews' cautions
for any check made on site.
"""

from __future__ import annotations

from collections.abc import Sequence
from html import escape
from pathlib import Path

import pandas as pd

from calibra.diagnosis.findings import MODEL_KINDS
from calibra.ledger.states import OPEN_STATES
from calibra.reports._values import fmt, number, text
from calibra.reports.checklist import checklist_items
from calibra.reports.html import TimeLike, sheet_head, when
from calibra.reports.safety import SAFETY_CAUTIONS, Caution
from calibra.reports.sheet_pages import DeviceSection, Sheet, ruled_table
from calibra.reports.spreadsheet import write_safe_csv

MODEL_SHEET_TITLE = "Network model checks"
#: Columns of model_work_orders.csv, one row per check; the last four are for the owner.
MODEL_WORK_ORDER_COLUMNS = [
    "site", "element", "parameter", "substation", "model_value", "estimated_value",
    "estimated_std", "change_pct", "confidence", "explains", "separable",
    "alternative_meters", "evidence", "check", "as_found", "decision", "initials", "date",
]
#: Printed after the crews' cautions.
MODEL_CAUTIONS = (
    Caution("Reading a nameplate, a tap position indicator or a reactor's rating on site is "
            "work in a substation: it follows the same safety rules as the crews' checks, and "
            "needs no contact with any live part.", "employer's procedures"),
    Caution("A model used by operations (state estimation, protection settings, planning) is "
            "changed only under the utility's model-change procedures; the estimate on this "
            "sheet is a lead to check against the datasheet, not a value to copy.",
            "employer's procedures; calibra"),
)


def needing_model_work(findings: pd.DataFrame) -> pd.DataFrame:
    """The open findings about the network model (all of them when the frame carries no
    ledger ``state``)."""
    mine = findings[findings["finding"].isin(MODEL_KINDS)]
    if "state" in mine.columns:
        mine = mine[mine["state"].isin(OPEN_STATES)]
    return mine


def _change_pct(row) -> float | None:
    model, estimate = number(row, "model_value"), number(row, "estimated_value")
    if model is None or estimate is None or model == 0 or text(row, "parameter") in (
            "tap", "shift"):
        return None
    return round(100.0 * (estimate - model) / abs(model), 1)


def _values(row) -> str:
    model, estimate = number(row, "model_value"), number(row, "estimated_value")
    std = number(row, "estimated_std")
    unit = text(row, "unit")
    unit = "" if unit in ("", "ratio") else f" {unit}"
    if model is None or estimate is None:
        return ""
    spread = f" ± {fmt(std, 2)}" if std is not None else ""
    change = _change_pct(row)
    return (f"model {fmt(model, 5)}{unit}, the meters fit {fmt(estimate, 5)}{spread}{unit}"
            + (f" ({change:+.0f} %)" if change is not None else ""))


def _separability(row) -> str:
    others = text(row, "alternative_meters")
    if not others:
        return "separable: no one or two meter errors explain the meters' disagreement"
    return (f"not separable: errors of {others} explain it as well (their findings stay on "
            "the crews' sheets)")


def model_sheet(site_name: str, findings: pd.DataFrame, generated_at: TimeLike,
                period: Sequence[TimeLike] | None = None) -> Sheet:
    """The model owner's sheet of ``findings`` (all model findings) as blocks for the
    printer."""
    if findings.empty:
        raise ValueError("no model findings for the model sheet")
    blocks, tags = [], []
    for _, row in findings.sort_values(["substation", "tag"]).iterrows():
        element, parameter = text(row, "element"), text(row, "parameter")
        heading = (f"<tr><td colspan=\"5\" class=\"finding\"><b>{escape(parameter)} of "
                   f"{escape(element)}: {escape(_values(row))}</b><br/><span class=\"small\">"
                   f"{escape(_separability(row))}. Meters it explains: "
                   f"{escape(text(row, 'explains') or 'none listed')}.<br/>"
                   f"{escape(text(row, 'evidence'))}</span></td></tr>")
        checks = [f"<tr><td>☐ {escape(c)}</td><td></td><td></td><td></td><td></td></tr>"
                  for c in checklist_items(row)]
        where = text(row, "substation")
        title = f"{element} · {parameter}" + (f" · substation {where}" if where else "")
        blocks.append(DeviceSection(title, [[heading, *checks]]))
        tags.append(text(row, "tag"))
    cautions = (*SAFETY_CAUTIONS, *MODEL_CAUTIONS)
    items = "".join(f"<li>{escape(c.text)} <i class=\"small\">({escape(c.sources)})</i></li>"
                    for c in cautions)
    span = "not given" if period is None else f"{when(period[0])} to {when(period[1])}"
    cells = [("Site", site_name), ("For", "the owner of the network model"),
             ("Review period", span), ("Prepared", when(generated_at)),
             ("Parameters to check", str(len(blocks)))]
    header = "".join(f"<tr><td><b>{escape(k)}</b></td><td>{escape(v)}</td></tr>"
                     for k, v in cells)
    opening = [
        f"<h1>{escape(MODEL_SHEET_TITLE)}</h1><table cellpadding=\"1\" cellspacing=\"0\">"
        f"{header}</table>",
        "<h2>Safety: read before starting</h2>" + ruled_table('class="safety"', 4)
        + f"<tr><td><ul>{items}</ul></td></tr></table>",
    ]
    closing = ("<h2>Decision</h2><p>☐ the model is corrected (value: ____________) "
               "☐ the model is right as it is (checked against: ____________)</p>"
               + ruled_table(padding=4) + "<tr><td>&nbsp;</td></tr>" * 3
               + "</table><p>Checked by (name, signature): ______________________________ "
               "Date: ______________</p>")
    return Sheet(MODEL_SHEET_TITLE, sheet_head(f"{site_name} — {MODEL_SHEET_TITLE}"), opening,
                 blocks, closing, tags)


def model_work_order_rows(findings: pd.DataFrame, site_name: str = "") -> pd.DataFrame:
    """One row per check of each model finding, with :data:`MODEL_WORK_ORDER_COLUMNS`."""
    records = []
    for _, row in findings.iterrows():
        for check in checklist_items(row):
            records.append({
                "site": site_name, "element": text(row, "element"),
                "parameter": text(row, "parameter"), "substation": text(row, "substation"),
                "model_value": number(row, "model_value"),
                "estimated_value": number(row, "estimated_value"),
                "estimated_std": number(row, "estimated_std"), "change_pct": _change_pct(row),
                "confidence": number(row, "confidence"), "explains": text(row, "explains"),
                "separable": "no" if text(row, "alternative_meters") else "yes",
                "alternative_meters": text(row, "alternative_meters"),
                "evidence": text(row, "evidence"), "check": check,
                "as_found": "", "decision": "", "initials": "", "date": "",
            })
    return pd.DataFrame(records, columns=MODEL_WORK_ORDER_COLUMNS)


def write_model_work_orders_csv(findings: pd.DataFrame, path: str | Path, *,
                                site_name: str = "") -> Path:
    """The model checks as a CSV no spreadsheet can execute, the cautions in its last rows."""
    rows = model_work_order_rows(findings, site_name)
    records = [[None if pd.isna(v) else v for v in r] for r in rows.itertuples(index=False)]
    blank = [None] * (len(MODEL_WORK_ORDER_COLUMNS) - 1)
    for c in (*SAFETY_CAUTIONS, *MODEL_CAUTIONS):
        records.append([f"Safety: {c.text} ({c.sources})", *blank])
    return write_safe_csv(path, MODEL_WORK_ORDER_COLUMNS, records)
