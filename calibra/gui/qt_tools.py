"""The window's tools beyond the review itself: the review period, exports (the selected
point's plots as PNG or SVG, the listed findings as CSV) and the user guide under Help."""

from __future__ import annotations

from importlib.resources import files
from pathlib import Path
from typing import TYPE_CHECKING

import pandas as pd
from PySide6.QtCore import QDateTime, QPoint, QRectF, QTimeZone
from PySide6.QtGui import QAction, QPainter
from PySide6.QtSvg import QSvgGenerator
from PySide6.QtWidgets import (
    QDateTimeEdit,
    QDialog,
    QDialogButtonBox,
    QFileDialog,
    QFormLayout,
    QLabel,
    QTextBrowser,
    QVBoxLayout,
    QWidget,
)

from calibra.model.times import for_people

if TYPE_CHECKING:
    from calibra.gui.qt_main import MainWindow

GUIDE = "guide.html"  #: in the package calibra.gui.guide


def guide_html() -> str:
    """The user guide shipped with the package."""
    return files("calibra.gui.guide").joinpath(GUIDE).read_text(encoding="utf-8")


class PeriodDialog(QDialog):
    """From and to, in the site's time zone, within the site's snapshots."""

    def __init__(self, first: pd.Timestamp, last: pd.Timestamp, current: tuple,
                 timezone: str, parent: QWidget | None = None):
        super().__init__(parent)
        self.setWindowTitle("Review period")
        zone = QTimeZone(timezone.encode())
        self.edits = []
        for default in (current[0] or first, current[1] or last):
            edit = QDateTimeEdit(self)
            edit.setTimeZone(zone)
            edit.setDisplayFormat("yyyy-MM-dd HH:mm")
            edit.setCalendarPopup(True)
            edit.setDateTimeRange(_qt(first, zone), _qt(last, zone))
            edit.setDateTime(_qt(default, zone))
            self.edits.append(edit)
        form = QFormLayout()
        form.addRow(f"From ({timezone})", self.edits[0])
        form.addRow(f"To ({timezone})", self.edits[1])
        note = QLabel(f"The site's snapshots run from {for_people(first, timezone)} to "
                      f"{for_people(last, timezone)}. The review runs on this period.", self)
        note.setWordWrap(True)
        buttons = QDialogButtonBox(QDialogButtonBox.Ok | QDialogButtonBox.Cancel, self)
        buttons.accepted.connect(self.accept)
        buttons.rejected.connect(self.reject)
        layout = QVBoxLayout(self)
        layout.addLayout(form)
        layout.addWidget(note)
        layout.addWidget(buttons)

    def values(self) -> tuple[pd.Timestamp, pd.Timestamp]:
        """The chosen period in UTC."""
        a, b = (pd.Timestamp(e.dateTime().toSecsSinceEpoch(), unit="s", tz="UTC")
                for e in self.edits)
        return (a, b) if a <= b else (b, a)


def _qt(t: pd.Timestamp, zone: QTimeZone) -> QDateTime:
    return QDateTime.fromSecsSinceEpoch(int(t.timestamp()), zone)


def save_widget(widget: QWidget, path: Path) -> Path:
    """A picture of ``widget``: SVG when the name ends in .svg, else a PNG."""
    path = Path(path)
    if path.suffix.lower() == ".svg":
        generator = QSvgGenerator()
        generator.setFileName(str(path))
        size = widget.size()
        generator.setSize(size)
        generator.setViewBox(QRectF(0, 0, size.width(), size.height()))
        generator.setTitle(widget.windowTitle() or "calibra plot")
        painter = QPainter(generator)
        try:
            widget.render(painter, QPoint(0, 0))
        finally:
            painter.end()
    else:
        if path.suffix.lower() != ".png":
            path = path.with_suffix(".png")
        if not widget.grab().save(str(path), "PNG"):
            raise OSError(f"could not write {path}")
    return path


class WindowTools:
    """Actions for the period, the exports and the guide; handlers report in the status bar."""

    def __init__(self, window: MainWindow):
        self.w = window
        self.state = window.state
        self.period_action = self._action("Review period…", self._on_period_clicked,
                                          "Choose the period to review, from and to")
        self.plot_action = self._action("Export plot…", self._on_export_plot_clicked,
                                        "Save the selected point's plots as PNG or SVG")
        self.csv_action = self._action("Export findings…", self._on_export_csv_clicked,
                                       "Save the findings the list shows as CSV")
        self.guide_action = self._action("User guide", self.show_guide,
                                         "How to review a site with calibra")
        self.guide_action.setShortcut("F1")
        self.dialog: QDialog | None = None

    def _action(self, text: str, handler, tip: str) -> QAction:
        action = QAction(text, self.w)
        action.setStatusTip(tip)
        action.triggered.connect(lambda _=False: handler())
        return action

    # ---- period -------------------------------------------------------------------------
    def period_dialog(self) -> PeriodDialog | None:
        site = self.state.site
        if site is None or not len(site.snapshots):
            self.w.say("Open a site first.")
            return None
        index = site.snapshots.index
        return PeriodDialog(index[0], index[-1], self.state.period, site.timezone, self.w)

    def _on_period_clicked(self) -> None:
        dialog = self.period_dialog()
        if dialog is not None and dialog.exec():
            self.set_period(*dialog.values())

    def set_period(self, start: pd.Timestamp | None, end: pd.Timestamp | None) -> None:
        """Review ``start``…``end`` (UTC) from now on, starting with a review at once."""
        self.state.set_period(start, end)
        zone = self.state.site.timezone if self.state.site is not None else "UTC"
        self.w.say(f"Review period {for_people(start, zone)} to {for_people(end, zone)}")
        self.w.start_review()

    # ---- exports ------------------------------------------------------------------------
    def _on_export_plot_clicked(self) -> None:
        if self.w.plots.trace is None:
            self.w.say("Select a point with a review first: there is no plot to export.")
            return
        name = f"{self.state.tag or 'plot'}.png".replace("|", "_")
        path, _ = QFileDialog.getSaveFileName(self.w, "Export plot", name,
                                              "PNG image (*.png);;SVG drawing (*.svg)")
        if path:
            self.export_plot(Path(path))

    def export_plot(self, path: Path) -> Path | None:
        try:
            written = save_widget(self.w.plots, path)
        except OSError as exc:
            self.w.say(f"Plot not saved: {exc}", warn=True)
            return None
        self.w.say(f"Plot saved to {written}")
        return written

    def _on_export_csv_clicked(self) -> None:
        path, _ = QFileDialog.getSaveFileName(self.w, "Export findings", "findings.csv",
                                              "CSV (*.csv)")
        if path:
            self.export_findings(Path(path))

    def export_findings(self, path: Path) -> Path | None:
        """The findings the list shows (filters applied), one row each."""
        table = self.state.view.visible()
        try:
            table.to_csv(path, index=False)
        except OSError as exc:
            self.w.say(f"Findings not saved: {exc}", warn=True)
            return None
        self.w.say(f"{len(table)} finding(s) saved to {path}")
        return Path(path)

    # ---- guide --------------------------------------------------------------------------
    def show_guide(self) -> QDialog:
        if self.dialog is None:
            dialog = QDialog(self.w)
            dialog.setWindowTitle("User guide")
            dialog.resize(760, 720)
            browser = QTextBrowser(dialog)
            browser.setObjectName("guide")
            browser.setHtml(guide_html())
            layout = QVBoxLayout(dialog)
            layout.addWidget(browser)
            buttons = QDialogButtonBox(QDialogButtonBox.Close, dialog)
            buttons.rejected.connect(dialog.reject)
            layout.addWidget(buttons)
            self.dialog = dialog
        self.dialog.show()
        self.dialog.raise_()
        return self.dialog
