"""One review of a site, end to end: ledger corrections in, findings, ledger and files out.

Used by ``calibra review`` and by the desktop application (from a worker thread, with its own
:class:`~calibra.ledger.Ledger` connection).
"""

from __future__ import annotations

import json
import time
from collections.abc import Callable, Iterable
from dataclasses import asdict, dataclass, field
from pathlib import Path

import pandas as pd

from calibra.diagnosis.findings import (
    MODEL_KINDS,
    RTU_KINDS,
    TAP_KINDS,
    FindingKind,
    findings_table,
)
from calibra.diagnosis.review import ReviewResult, ReviewSettings, review_site
from calibra.diagnosis.review_summary import ReviewSummary
from calibra.estimation.engine import PeriodEngine
from calibra.ledger import Ledger
from calibra.ledger.states import FindingState
from calibra.model.availability import availability_lines
from calibra.model.site import Site
from calibra.model.times import for_machines, for_people
from calibra.open_work import carried_findings, reopened_evidence
from calibra.progress import Progress
from calibra.reports import (
    Sheet,
    model_sheet,
    needing_field_work,
    needing_model_work,
    needing_rtu_work,
    rtu_sheet,
    work_order_sheets,
    write_model_work_orders_csv,
    write_rtu_work_orders_csv,
    write_safe_csv,
    write_work_orders_csv,
)
from calibra.review_period import period_for_review

FINDINGS_FILE = "findings.csv"
WORK_ORDERS_CSV = "work_orders.csv"
WORK_ORDERS_PDF = "work_orders.pdf"
#: The RTU/SCADA engineer's checks (RTU clocks), written when the review has open ones.
RTU_WORK_ORDERS_CSV = "rtu_work_orders.csv"
#: The network model owner's checks (model findings), written when the review has open ones.
MODEL_WORK_ORDERS_CSV = "model_work_orders.csv"
SUMMARY_FILE = "summary.txt"
SUMMARY_JSON = "summary.json"

#: Prints sheets to a PDF: ``writer(sheets, path, title=…, footer=…) -> path`` (the desktop
#: layer's :func:`calibra.gui.qt_pdf.sheets_to_pdf`, handed in by the caller).
PdfWriter = Callable[..., Path]


@dataclass
class ReviewRun:
    """What one review produced."""

    result: ReviewResult
    findings: pd.DataFrame  # findings.csv content, with the ledger state
    review_id: int | None
    corrections: list
    seconds: float
    files: dict[str, Path] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)
    #: Points judged only on their data after a repair inside the period: tag → repair time.
    repairs_judged: dict = field(default_factory=dict)


def settings_dict(settings: ReviewSettings) -> dict:
    return asdict(settings)


def run_review(
    site: Site,
    settings: ReviewSettings | None = None,
    start: pd.Timestamp | None = None,
    end: pd.Timestamp | None = None,
    ledger: Ledger | None = None,
    progress: Progress | None = None,
    engine: PeriodEngine | None = None,
) -> ReviewRun:
    """Review ``site`` between ``start`` and ``end`` with the ledger's software corrections
    (``engine``: where the estimates run, e.g. a :class:`calibra.cluster.ClusterEngine` the
    caller built; default this machine)."""
    st = settings or ReviewSettings()
    t0 = time.perf_counter()
    period = period_for_review(site, start, end, ledger)
    corrections, repairs = list(period.corrections), dict(period.held_out)
    result = review_site(site, st, period, progress, engine)
    table = findings_table(result.findings)
    table["in_this_review"] = True
    review_id = None
    if ledger is not None:
        summary = result.summary.as_dict(rounds=False)
        unverifiable = {f.tag for f in result.findings if f.finding == FindingKind.UNVERIFIABLE}
        judged = set(result.diagnoses) - unverifiable
        review_id = ledger.record_review(
            result.findings, period.index[0], period.index[-1], settings_dict(st), summary,
            judged_from=repairs, not_judged=set(site.points.index.astype(str)) - judged)
        table = _with_ledger(table, ledger, corrections, site.timezone)
    else:
        table["state"] = FindingState.NEW
    run = ReviewRun(result, table, review_id, corrections, time.perf_counter() - t0)
    run.repairs_judged = repairs
    return run


def _with_ledger(table: pd.DataFrame, ledger: Ledger, corrections: list,
                 timezone: str) -> pd.DataFrame:
    """The review's findings with their ledger state (and reopen reason), followed by the
    findings the ledger still holds open for the field that the review did not see."""
    known = ledger.findings()
    for name, fill in (("state", FindingState.NEW), ("reopened", ""), ("repaired_at", pd.NaT)):
        table[name] = table["finding_id"].map(known[name]).fillna(fill) if len(known) else fill
    carried = carried_findings(ledger, table["finding_id"], corrections, timezone)
    if len(carried):
        carried["in_this_review"] = False
        carried = carried.reindex(columns=table.columns)
        table = pd.concat([table.astype(object), carried.astype(object)],
                          ignore_index=True).infer_objects()
    table["evidence"] = reopened_evidence(table, timezone)
    table["in_this_review"] = table["in_this_review"].astype(bool)
    return table


#: How each written file is named to a person (the keys of :func:`write_outputs`' result).
OUTPUT_LABELS = {
    "findings": "findings",
    "work_orders_csv": "work orders (spreadsheet)",
    "work_orders_pdf": "work orders (PDF sheets)",
    "rtu_work_orders_csv": "RTU/SCADA checks (spreadsheet)",
    "model_work_orders_csv": "network model checks (spreadsheet)",
    "summary": "summary",
    "summary_json": "summary for programs (JSON)",
}


def write_outputs(run: ReviewRun, site: Site, out: Path,
                  pdf_writer: PdfWriter | None = None) -> dict[str, Path]:
    """findings.csv, the work orders (CSV and, given ``pdf_writer``, PDF) and a summary."""
    out.mkdir(parents=True, exist_ok=True)
    files: dict[str, Path] = {}
    table = run.findings.copy()
    for col in ("onset", "until", "repaired_at"):
        if col in table.columns:
            table[col] = pd.to_datetime(table[col], utc=True).map(for_machines)
    cols = list(table.columns)
    rows = ([None if (not isinstance(v, str) and pd.isna(v)) else v for v in r]
            for r in table.itertuples(index=False))
    files["findings"] = write_safe_csv(out / FINDINGS_FILE, cols, rows)
    field_work = needing_field_work(run.findings)
    files["work_orders_csv"] = write_work_orders_csv(field_work, site.points,
                                                     out / WORK_ORDERS_CSV, site_name=site.name)
    rtu_work = needing_rtu_work(run.findings)
    if len(rtu_work):
        files["rtu_work_orders_csv"] = write_rtu_work_orders_csv(
            rtu_work, site.points, out / RTU_WORK_ORDERS_CSV, site_name=site.name)
    model_work = needing_model_work(run.findings)
    if len(model_work):
        files["model_work_orders_csv"] = write_model_work_orders_csv(
            model_work, out / MODEL_WORK_ORDERS_CSV, site_name=site.name)
    # Times for people on the sheets: the site's zone, as the desktop application prints them.
    tz = site.timezone
    period = (run.result.period_start.tz_convert(tz), run.result.period_end.tz_convert(tz))
    if pdf_writer is not None and (len(field_work) or len(rtu_work) or len(model_work)):
        now = pd.Timestamp.now(tz="UTC").tz_convert(tz)
        sheets = work_order_sheets(site.name, field_work, site.points, now, period=period)
        printed = list(sheets.values())
        if len(rtu_work):
            # The RTU/SCADA engineer's sheet comes after the crews' substation sheets.
            printed.append(rtu_sheet(site.name, rtu_work, site.points, now, period))
        if len(model_work):
            # The model owner's sheet comes last: it is not field work.
            printed.append(model_sheet(site.name, model_work, now, period))
        files["work_orders_pdf"] = pdf_writer(printed, out / WORK_ORDERS_PDF,
                                              title=f"{site.name}: field checks",
                                              footer=site.name)
        run.notes += work_order_lines(sheets.values()) if sheets else []
    run.notes += rtu_work_lines(rtu_work) + model_work_lines(model_work)
    (out / SUMMARY_FILE).write_text("\n".join(summary_lines(run, site)) + "\n", encoding="utf-8")
    files["summary"] = out / SUMMARY_FILE
    (out / SUMMARY_JSON).write_text(json.dumps(_json_summary(run), indent=2, default=str),
                                    encoding="utf-8")
    files["summary_json"] = out / SUMMARY_JSON
    run.files = files
    return files


def work_order_lines(sheets: Iterable[Sheet]) -> list[str]:
    """What the work orders ask the crews to check, counted in points."""
    sheets = list(sheets)
    per = ", ".join(f"{s.substation} {len(s.tags)}" for s in sheets)
    total = sum(len(s.tags) for s in sheets)
    return [f"work orders: {total} point{'s' if total != 1 else ''} to check at "
            f"{len(sheets)} substation{'s' if len(sheets) != 1 else ''} ({per})"]


def rtu_work_lines(rtu_work: pd.DataFrame) -> list[str]:
    """What the RTU/SCADA engineer is asked to check ([] when nothing)."""
    if rtu_work.empty:
        return []
    taps = rtu_work["finding"].isin(TAP_KINDS)
    parts = []
    for rows, what in ((rtu_work[~taps], "RTU clock"), (rtu_work[taps], "tap changer")):
        if len(rows):
            names = ", ".join(sorted(set(rows["tag"].astype(str))))
            parts.append(f"{len(rows)} {what}{'s' if len(rows) != 1 else ''} ({names})")
    return [f"RTU checks: {' and '.join(parts)} to check, on their own sheet for the RTU/SCADA "
            "engineer"]


def model_work_lines(model_work: pd.DataFrame) -> list[str]:
    """What the network model's owner is asked to check ([] when nothing)."""
    if model_work.empty:
        return []
    n = len(model_work)
    names = ", ".join(sorted(set(model_work["tag"].astype(str))))
    return [f"model checks: {n} network-model parameter{'s' if n != 1 else ''} to check "
            f"({names}), on their own sheet for the model's owner"]


def _json_summary(run: ReviewRun) -> dict:
    s = run.result.summary.as_dict()
    s["seconds"] = round(run.seconds, 1)
    s["review_id"] = run.review_id
    s["corrections_applied"] = [asdict(c) for c in run.corrections]
    s["model_corrections_applied"] = [
        {"element": c.parameter.element, "parameter": str(c.parameter.kind),
         "decision": str(c.decision), "value": c.value, "reason": c.reason, "row": c.row}
        for c in run.result.model_corrections]
    s["findings_by_kind"] = run.findings["finding"].value_counts().to_dict()
    return s


def observability_text(s: ReviewSummary, n_bus: int) -> str:
    """'; partly observable 1,008 (up to 3 of 89 buses not estimated); …' or ''."""
    parts = []
    if s.partly_observable:
        parts.append(f"partly observable {s.partly_observable:,} (up to "
                     f"{s.most_buses_not_estimated:,} of {n_bus:,} buses not estimated)")
    if s.not_observable:
        parts.append(f"not observable at all {s.not_observable:,}")
    return "".join(f"; {p}" for p in parts)


def summary_lines(run: ReviewRun, site: Site) -> list[str]:
    """A short plain-text summary of the review."""
    r = run.result
    s = r.summary
    tz = site.timezone
    lines = [
        f"site {site.name}: review of {for_people(r.period_start, tz)} to "
        f"{for_people(r.period_end, tz)} ({tz}) in {run.seconds:.1f} s",
        f"snapshots: {s.snapshots:,}, estimated {s.converged:,}"
        + observability_text(s, site.network.n_bus),
    ]
    lines += [f"not estimated: {why}" for why in s.estimation_failures]
    lines += availability_lines(site)
    lines += [f"status point contradicted: {c}" for c in s.status_conflicts]
    lines += [f"tap position not usable: {c}" for c in s.tap_fallbacks]
    first = s.rounds[0] if s.rounds else None
    if first:
        lines.append(f"chi-square failures with every point in: {first['chi2_failed']} of "
                     f"{first['snapshots']} sampled snapshots")
    lines.append(f"chi-square failures with the {s.set_aside} suspect point(s) set aside: "
                 f"{s.chi2_failed:,} of {s.converged:,} snapshots")
    if run.corrections:
        lines.append(f"software corrections applied: {len(run.corrections)} "
                     f"({', '.join(sorted({c.tag for c in run.corrections}))})")
    lines += [f"network model as the owner decided (model-corrections.csv, row {c.row}): "
              f"{c.describe()}" for c in r.model_corrections]
    about_tap = run.findings["finding"].isin(TAP_KINDS)
    about_rtu = run.findings["finding"].isin(RTU_KINDS) & ~about_tap
    about_model = run.findings["finding"].isin(MODEL_KINDS)
    meters = ~about_rtu & ~about_tap & ~about_model
    found = run.findings if len(run.findings) else None

    def distinct(rows) -> int:
        return int(found.loc[rows, "tag"].nunique()) if found is not None else 0

    n_points, n_rtus, n_taps, n_model = (distinct(x) for x in (meters, about_rtu, about_tap,
                                                                about_model))
    lines.append(f"findings: {len(run.findings)} on {n_points} point"
                 f"{'s' if n_points != 1 else ''}"
                 + (f" and {n_rtus} RTU{'s' if n_rtus != 1 else ''}" if n_rtus else "")
                 + (f" and {n_taps} tap changer{'s' if n_taps != 1 else ''}" if n_taps else "")
                 + (f" and {n_model} network-model parameter{'s' if n_model != 1 else ''}"
                    if n_model else ""))
    counts = run.findings.groupby("finding")["tag"].nunique().sort_values(ascending=False,
                                                                          kind="stable")
    for kind, n in counts.items():
        what = ("tap changer" if kind in TAP_KINDS else "RTU" if kind in RTU_KINDS
                else "parameter" if kind in MODEL_KINDS else "point")
        lines.append(f"  {kind}: {n} {what}{'s' if n != 1 else ''}")
    for row in run.findings.sort_values(["substation", "device", "tag"]).itertuples():
        lines.append(f"  [{row.state}] {row.tag} ({row.substation}) {row.finding}: "
                     f"{row.evidence}")
    lines.append("Findings are advisory: confirm in the field under the utility's own safety "
                 "procedures.")
    return lines
