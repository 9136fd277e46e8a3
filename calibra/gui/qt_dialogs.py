"""Small dialogs: load problems, review settings, the questions an action asks, About."""

from __future__ import annotations

import pandas as pd
from PySide6.QtCore import QDateTime, QTimeZone
from PySide6.QtWidgets import (
    QDateTimeEdit,
    QDialog,
    QDialogButtonBox,
    QDoubleSpinBox,
    QFormLayout,
    QInputDialog,
    QLabel,
    QSpinBox,
    QVBoxLayout,
    QWidget,
)

from calibra.app_settings import SiteSettings
from calibra.gui.qt_details import PROBLEM_HEADERS, _Table, problem_rows
from calibra.model.site import LoadProblem

ABOUT_HTML = """
<h3>calibra {version}</h3>
<p>Checks that every analog point measures what the point list says, using the network's
redundancy over a week of snapshots (AC weighted least-squares state estimation).</p>
<p><b>Findings are advisory.</b> They come from software analysis of telemetry: confirm each
one in the field before changing wiring or settings.</p>
<p>Field work on instrument transformers is dangerous. Never open the secondary circuit of an
energized CT; work only as qualified personnel, under lockout/tagout and the utility's own
switching and safety procedures; local codes govern.</p>
"""


class ProblemsDialog(QDialog):
    """Every problem found while loading a site, with file, row and column."""

    def __init__(self, title: str, problems: list[LoadProblem], parent: QWidget | None = None):
        super().__init__(parent)
        self.setWindowTitle(title)
        self.resize(900, 420)
        errors = sum(p.severity == "error" for p in problems)
        summary = QLabel(f"{errors} error(s), {len(problems) - errors} warning(s). "
                         "Fix the files named below and open the site again.", self)
        self.table = _Table(PROBLEM_HEADERS, self)
        self.table.fill(problem_rows(problems))
        buttons = QDialogButtonBox(QDialogButtonBox.Close, self)
        buttons.rejected.connect(self.reject)
        layout = QVBoxLayout(self)
        layout.addWidget(summary)
        layout.addWidget(self.table, 1)
        layout.addWidget(buttons)

    def rows(self) -> list[list[str]]:
        """The table's text, row by row (for checks)."""
        return [[self.table.item(r, c).text() for c in range(self.table.columnCount())]
                for r in range(self.table.rowCount())]


class SettingsDialog(QDialog):
    """The review settings saved with the site."""

    def __init__(self, settings: SiteSettings, where: str, parent: QWidget | None = None):
        super().__init__(parent)
        self.setWindowTitle("Review settings")
        self.threshold = QDoubleSpinBox(self)
        self.threshold.setRange(1.0, 20.0)
        self.threshold.setDecimals(2)
        self.threshold.setSingleStep(0.25)
        self.threshold.setToolTip("Normalized residual above which a point is a suspect")
        self.confidence = QDoubleSpinBox(self)
        self.confidence.setRange(0.5, 0.9999)
        self.confidence.setDecimals(4)
        self.confidence.setSingleStep(0.005)
        self.confidence.setToolTip("Level of the chi-square test of each snapshot")
        self.min_snapshots = QSpinBox(self)
        self.min_snapshots.setRange(1, 1_000_000)
        self.min_snapshots.setToolTip("Fewest snapshots with a measured and an implied value a "
                                      "point needs to be judged")
        self.set_values(settings)
        form = QFormLayout()
        form.addRow("Normalized residual threshold", self.threshold)
        form.addRow("Chi-square confidence level", self.confidence)
        form.addRow("Fewest snapshots per point", self.min_snapshots)
        buttons = QDialogButtonBox(QDialogButtonBox.Save | QDialogButtonBox.Cancel
                                   | QDialogButtonBox.RestoreDefaults, self)
        buttons.accepted.connect(self.accept)
        buttons.rejected.connect(self.reject)
        buttons.button(QDialogButtonBox.RestoreDefaults).clicked.connect(
            lambda: self.set_values(SiteSettings()))
        note = QLabel(f"Saved with the site in {where}; used by the next review.", self)
        note.setWordWrap(True)
        layout = QVBoxLayout(self)
        layout.addLayout(form)
        layout.addWidget(note)
        layout.addWidget(buttons)

    def set_values(self, settings: SiteSettings) -> None:
        self.threshold.setValue(settings.normalized_threshold)
        self.confidence.setValue(settings.confidence)
        self.min_snapshots.setValue(settings.min_snapshots)

    def values(self) -> SiteSettings:
        return SiteSettings(self.threshold.value(), self.confidence.value(),
                            self.min_snapshots.value())


class Prompts:
    """The questions actions ask (a number, a text, a time); tests replace this object."""

    def __init__(self, parent: QWidget):
        self.parent = parent

    def number(self, title: str, label: str, value: float) -> float | None:
        got, ok = QInputDialog.getDouble(self.parent, title, label, value, -1e9, 1e9, 4)
        return got if ok else None

    def text(self, title: str, label: str) -> str | None:
        got, ok = QInputDialog.getMultiLineText(self.parent, title, label)
        return got.strip() if ok and got.strip() else None

    def when(self, title: str, label: str, default: pd.Timestamp,
             timezone: str) -> pd.Timestamp | None:
        """A time in the site's timezone, returned in UTC."""
        dialog = QDialog(self.parent)
        dialog.setWindowTitle(title)
        edit = QDateTimeEdit(dialog)
        edit.setCalendarPopup(True)
        edit.setDisplayFormat("yyyy-MM-dd HH:mm")
        zone = QTimeZone(timezone.encode())
        local = default.tz_convert(timezone)
        edit.setTimeZone(zone)
        edit.setDateTime(QDateTime.fromSecsSinceEpoch(int(local.timestamp()), zone))
        buttons = QDialogButtonBox(QDialogButtonBox.Ok | QDialogButtonBox.Cancel, dialog)
        buttons.accepted.connect(dialog.accept)
        buttons.rejected.connect(dialog.reject)
        layout = QVBoxLayout(dialog)
        layout.addWidget(QLabel(f"{label} ({timezone})", dialog))
        layout.addWidget(edit)
        layout.addWidget(buttons)
        if dialog.exec() != QDialog.Accepted:
            return None
        return pd.Timestamp(edit.dateTime().toSecsSinceEpoch(), unit="s", tz="UTC")
