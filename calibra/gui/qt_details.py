"""Side tabs: the selected point (metadata, finding, evidence), its ledger history, the site
that was loaded, and the reviews of this session with the before/after comparison."""

from __future__ import annotations

from html import escape

import pandas as pd
from PySide6.QtCore import Qt
from PySide6.QtWidgets import (
    QAbstractItemView,
    QHeaderView,
    QLabel,
    QTableWidget,
    QTableWidgetItem,
    QTabWidget,
    QTextBrowser,
    QVBoxLayout,
    QWidget,
)

from calibra.diagnosis.findings import MODEL_KINDS, TAP_KINDS
from calibra.gui.qt_style import STATE_COLOURS
from calibra.gui.run_compare import RunFigures, changed_findings, comparison_rows
from calibra.io.site_summary import site_summary_lines
from calibra.model.site import LoadProblem, Site
from calibra.model.times import for_people

_METADATA = [("quantity", "Quantity"), ("element", "Element"), ("end", "End"),
             ("unit", "Unit"), ("full_scale", "Full scale"), ("accuracy_pct", "Accuracy (%)"),
             ("substation", "Substation"), ("device", "Device"), ("rtu", "RTU"),
             ("channel", "Channel"), ("ct_ratio", "CT ratio"), ("vt_ratio", "VT ratio"),
             ("deadband", "Deadband (stated)"), ("resolution", "Resolution (stated)"),
             ("note", "Note")]
_FINDING = [("finding", "Finding"), ("confidence", "Confidence"), ("factor", "Factor"),
            ("offset", "Offset"), ("drift_per_day", "Drift per day"), ("onset", "Onset"),
            ("scope", "Scope"), ("cause", "Likely cause"), ("matched", "Reads instead"),
            ("action", "Suggested check")]


def _cell(value) -> str:
    if value is None or (not isinstance(value, str) and pd.isna(value)):
        return ""
    if isinstance(value, float):
        return f"{value:.4g}"
    return str(value)


def _rows(pairs: list[tuple[str, str]]) -> str:
    return "".join(f"<tr><td style='color:#5a6169;padding-right:10px'>{escape(k)}</td>"
                   f"<td>{escape(v)}</td></tr>" for k, v in pairs if v)


def point_html(site: Site, tag: str, finding: pd.Series | None, timezone: str) -> str:
    """The point's metadata and, when it has one, its finding and evidence, as HTML."""
    pt = site.points.loc[tag]
    parts = [f"<h3 style='margin:2px 0'>{escape(tag)}</h3>"]
    if finding is not None:
        state = str(finding.get("state", ""))
        colour = STATE_COLOURS.get(state, "#5a6169")
        seen = "" if finding.get("in_review", True) else (
            " · <i>not found by the latest review</i>")
        parts.append(f"<p style='margin:2px 0'><b>{escape(str(finding['finding']))}</b> · "
                     f"<span style='color:{colour}'>{escape(state)}</span>{seen}</p>"
                     f"<p style='margin:6px 0'>{escape(str(finding.get('evidence', '')))}</p>")
        values = []
        for key, label in _FINDING:
            value = finding.get(key)
            if key == "onset" and value is not None and not pd.isna(value):
                value = for_people(value, timezone, weekday=True)
            values.append((label, _cell(value)))
        parts.append(f"<table>{_rows(values)}</table>")
    else:
        parts.append("<p>No open finding for this point in the latest review.</p>")
    parts.append("<p style='margin:8px 0 2px 0'><b>Point list</b></p>")
    parts.append(f"<table>{_rows([(label, _cell(pt.get(key))) for key, label in _METADATA])}"
                 "</table>")
    return "".join(parts)


def rtu_html(site: Site, rtu: str, finding: pd.Series) -> str:
    """A finding about an RTU rather than a point (its clock): the finding, its evidence and
    the RTU's points from the point list, as HTML."""
    state = str(finding.get("state", ""))
    colour = STATE_COLOURS.get(state, "#5a6169")
    offset = finding.get("offset")
    tap = str(finding.get("finding")) in TAP_KINDS
    values = [("Finding", _cell(finding.get("finding"))),
              ("Confidence", _cell(finding.get("confidence"))),
              ("Ratio range (highest / lowest)", _cell(finding.get("factor"))) if tap else
              ("Clock offset (s, late positive)", _cell(offset)),
              ("Substation", _cell(finding.get("substation"))),
              ("Likely cause", _cell(finding.get("cause"))),
              ("Suggested check", _cell(finding.get("action")))]
    pts = site.points
    mine = pts[pts["rtu"].astype(str) == rtu] if "rtu" in pts else pts.iloc[:0]
    rows = [(str(tag), f"{p['quantity']} · {p['element']}" + (f" · {p['end']}" if
                                                               _cell(p.get("end")) else ""))
            for tag, p in mine.iterrows()]
    title = f"Transformer {rtu} tap changer" if tap else f"RTU {rtu}"
    return "".join([
        f"<h3 style='margin:2px 0'>{escape(title)}</h3>",
        f"<p style='margin:2px 0'><b>{escape(str(finding['finding']))}</b> · "
        f"<span style='color:{colour}'>{escape(state)}</span></p>",
        f"<p style='margin:6px 0'>{escape(str(finding.get('evidence', '')))}</p>",
        f"<table>{_rows(values)}</table>",
        f"<p style='margin:8px 0 2px 0'><b>Points of the RTU ({len(rows)})</b></p>",
        f"<table>{_rows(rows)}</table>",
    ])


def model_html(finding: pd.Series) -> str:
    """A finding about a parameter of the network model: the model's value, the estimate, the
    meters it explains and what to do, as HTML."""
    state = str(finding.get("state", ""))
    colour = STATE_COLOURS.get(state, "#5a6169")
    std = finding.get("estimated_std")
    estimate = _cell(finding.get("estimated_value"))
    values = [("Parameter", f"{_cell(finding.get('parameter'))} of "
                            f"{_cell(finding.get('element'))}"),
              ("Model value", _cell(finding.get("model_value"))),
              ("Estimate", f"{estimate} ± {_cell(std)}" if estimate else ""),
              ("Unit", _cell(finding.get("unit"))),
              ("Confidence", _cell(finding.get("confidence"))),
              ("Substation", _cell(finding.get("substation"))),
              ("Meters it explains", _cell(finding.get("explains"))),
              ("Not separable from", _cell(finding.get("alternative_meters"))),
              ("Suggested check", _cell(finding.get("action")))]
    return "".join([
        f"<h3 style='margin:2px 0'>Network model: {escape(str(finding.get('tag', '')))}</h3>",
        f"<p style='margin:2px 0'><b>{escape(str(finding['finding']))}</b> · "
        f"<span style='color:{colour}'>{escape(state)}</span></p>",
        f"<p style='margin:6px 0'>{escape(str(finding.get('evidence', '')))}</p>",
        f"<table>{_rows(values)}</table>",
        "<p style='margin:8px 0 2px 0'>For the owner of the network model: Point ▸ Correct "
        "the model… records the value in model-corrections.csv for every later review; Point "
        "▸ Model value is right… closes it and leaves the meters around it as the suspects. "
        "Advisory: check the datasheet, nameplate or tap position first.</p>",
    ])


def _payload_text(payload: dict, timezone: str) -> str:
    bits = []
    for key in ("factor", "offset", "reason", "note"):
        if payload.get(key) not in (None, ""):
            bits.append(f"{key} {payload[key]}")
    for key in ("at", "valid_from"):
        if payload.get(key):
            bits.append(f"{key.replace('_', ' ')} {for_people(payload[key], timezone)}")
    if payload.get("review"):
        bits.append(f"review {payload['review']}")
    return "; ".join(bits)


class _Table(QTableWidget):
    """A read-only table: every column as wide as its content, except the ``wrap`` column (the
    long text), which takes the remaining width and wraps, rows growing to show all of it."""

    def __init__(self, headers: list[str], parent: QWidget | None = None, wrap: int = -1):
        super().__init__(0, len(headers), parent)
        self.wrap = wrap if wrap >= 0 else len(headers) + wrap
        self.setHorizontalHeaderLabels(headers)
        self.setEditTriggers(QAbstractItemView.NoEditTriggers)
        self.setSelectionBehavior(QAbstractItemView.SelectRows)
        self.setHorizontalScrollBarPolicy(Qt.ScrollBarAlwaysOff)
        self.verticalHeader().setVisible(False)
        self.verticalHeader().setSectionResizeMode(QHeaderView.ResizeToContents)
        header = self.horizontalHeader()
        header.setStretchLastSection(False)
        header.setSectionResizeMode(QHeaderView.ResizeToContents)
        header.setSectionResizeMode(self.wrap, QHeaderView.Stretch)
        self.setWordWrap(True)

    def fill(self, rows: list[list[str]]) -> None:
        self.setRowCount(len(rows))
        for r, row in enumerate(rows):
            for c, value in enumerate(row):
                self.setItem(r, c, QTableWidgetItem(value))


def problem_rows(problems: list[LoadProblem]) -> list[list[str]]:
    """Load problems as table rows: severity, file, row, column, message."""
    return [[p.severity, p.file, "" if p.row is None else str(p.row), p.column or "",
             p.message + (f" ({p.count} values)" if p.count > 1 else "")] for p in problems]


PROBLEM_HEADERS = ["severity", "file", "row", "column", "problem"]


class DetailTabs(QTabWidget):
    """Point · History · Site · Reviews."""

    def __init__(self, parent: QWidget | None = None):
        super().__init__(parent)
        self.point = QTextBrowser(self)
        self.point.setOpenLinks(False)
        self.history = _Table(["when, who", "action, on", "details"], self)
        self.site_text = QTextBrowser(self)
        self.problems = _Table(PROBLEM_HEADERS, self)
        site_page = self.site_page = QWidget(self)
        lay = QVBoxLayout(site_page)
        lay.setContentsMargins(2, 2, 2, 2)
        lay.addWidget(self.site_text, 2)
        self.problems_title = QLabel("Load problems", site_page)
        self.problems_title.setObjectName("sectionTitle")
        lay.addWidget(self.problems_title)
        lay.addWidget(self.problems, 1)
        self.compare = _Table(["figure", "before", "after"], self, wrap=0)
        self.compare_note = QTextBrowser(self)
        runs_page = QWidget(self)
        lay = QVBoxLayout(runs_page)
        lay.setContentsMargins(2, 2, 2, 2)
        lay.addWidget(self.compare, 3)
        lay.addWidget(self.compare_note, 2)
        self.addTab(self.point, "Point")
        self.addTab(self.history, "History")
        self.addTab(site_page, "Site")
        self.addTab(runs_page, "Reviews")

    def show_point(self, site: Site | None, tag: str | None, finding: pd.Series | None) -> None:
        if site is not None and tag is not None and tag not in site.points.index \
                and finding is not None:
            model = str(finding.get("finding")) in MODEL_KINDS
            self.point.setHtml(model_html(finding) if model else rtu_html(site, tag, finding))
            return
        if site is None or tag is None or tag not in site.points.index:
            self.point.setHtml("<p>Select a finding in the list.</p>")
            return
        self.point.setHtml(point_html(site, tag, finding, site.timezone))

    def show_history(self, history: pd.DataFrame | None, timezone: str) -> None:
        """The ledger's actions on the point, newest first."""
        if history is None or history.empty:
            self.history.fill([])
            return
        rows = []
        for _, a in history.iloc[::-1].iterrows():
            fid = a["finding_id"]
            on = str(fid).partition("|")[2] if isinstance(fid, str) else "whole point"
            undone = "" if pd.isna(a["undone_by"]) else "\n(undone)"
            rows.append([f"{for_people(a['at'], timezone, seconds=True)}\n{a['user']}",
                         f"{a['action']}\n{on}{undone}",
                         _payload_text(a["payload"] or {}, timezone)])
        self.history.fill(rows)

    def show_site(self, site: Site | None) -> None:
        if site is None:
            self.site_text.setHtml("<p>No site open.</p>")
            self.problems.fill([])
            return
        lines = site_summary_lines(site)
        self.site_text.setHtml(f"<p><b>{escape(str(site.path))}</b></p>"
                               + "".join(f"<p style='margin:3px 0'>{escape(t)}</p>"
                                         for t in lines))
        self.problems_title.setText(f"Load problems ({len(site.problems)})")
        self.problems.fill(problem_rows(site.problems))

    def show_runs(self, before: RunFigures | None, after: RunFigures | None) -> None:
        if after is None:
            self.compare.fill([])
            self.compare_note.setHtml("<p>No review in this session yet.</p>")
            return
        self.compare.fill([list(r) for r in comparison_rows(before, after)])
        if before is None:
            self.compare_note.setHtml("<p>Re-run the review after corrections to compare.</p>")
            return
        gone, new = changed_findings(before, after)
        self.compare_note.setHtml(
            "<p><b>No longer found</b>: " + (escape(", ".join(gone)) or "none") + "</p>"
            "<p><b>Newly found</b>: " + (escape(", ".join(new)) or "none") + "</p>")
