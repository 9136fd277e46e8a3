"""The import dialog: a new site folder from a historian export, a point list and a network.

The work is :mod:`calibra.io.site_import` (Qt-free); this dialog only gathers the inputs,
shows the plan (the mapping table, the exports and the network) before anything is written,
runs the import in a worker thread (:class:`~calibra.gui.qt_jobs.JobRunner`) with progress
and cancel, lists every problem the loader reports, and hands the new folder to the window.
"""

from __future__ import annotations

import zoneinfo
from pathlib import Path

import pandas as pd
from PySide6.QtCore import Signal
from PySide6.QtWidgets import (
    QComboBox,
    QDialog,
    QFileDialog,
    QFormLayout,
    QGroupBox,
    QHBoxLayout,
    QLabel,
    QLineEdit,
    QPlainTextEdit,
    QProgressBar,
    QPushButton,
    QTableWidget,
    QTabWidget,
    QVBoxLayout,
    QWidget,
)

from calibra.gui.qt_details import PROBLEM_HEADERS, _Table, problem_rows
from calibra.gui.qt_jobs import JobRunner
from calibra.io.import_mapping import ALL_COLUMNS, point_list_headers
from calibra.io.import_report import mapping_rows, overview_lines
from calibra.io.problems import ProblemLog
from calibra.io.site_import import (
    ImportOutcome,
    ImportPlan,
    ImportRefused,
    ImportRequest,
    SiteFields,
    plan_import,
    run_import,
)
from calibra.io.snapshot_settings import positive_duration
from calibra.model.site import LoadProblem

MAPPING_HEADERS = ["calibra column", "the file's header", "where", "found by", "first values"]
PREVIEW, IMPORT = "import preview", "import"
FREQUENCIES = ("", "50", "60")


class _Files(QWidget):
    """A line showing the chosen files and a button that chooses them."""

    def __init__(self, title: str, filters: str, many: bool, parent: QWidget):
        super().__init__(parent)
        self.paths: list[Path] = []
        self.title, self.filters, self.many = title, filters, many
        self.line = QLineEdit(self)
        self.line.setReadOnly(True)
        self.line.setPlaceholderText("none chosen")
        self.button = QPushButton("Choose…", self)
        self.button.clicked.connect(self._on_choose_clicked)
        lay = QHBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.addWidget(self.line, 1)
        lay.addWidget(self.button)

    def set_paths(self, paths: list[Path]) -> None:
        self.paths = [Path(p) for p in paths]
        names = ", ".join(p.name for p in self.paths[:3])
        more = f" and {len(self.paths) - 3} more" if len(self.paths) > 3 else ""
        self.line.setText(f"{names}{more}" + (f"  ({self.paths[0].parent})" if self.paths else ""))
        self.line.setCursorPosition(0)  # the names, not the end of the folder

    def _on_choose_clicked(self) -> None:
        start = str(self.paths[0].parent) if self.paths else ""
        if self.many:
            chosen, _ = QFileDialog.getOpenFileNames(self, self.title, start, self.filters)
        else:
            one, _ = QFileDialog.getOpenFileName(self, self.title, start, self.filters)
            chosen = [one] if one else []
        if chosen:
            self.set_paths([Path(c) for c in chosen])


class ImportDialog(QDialog):
    """Choose the exports and the new folder, preview, import, open. ``site_ready(path)`` is
    emitted when the user opens the imported site."""

    site_ready = Signal(object)

    def __init__(self, parent: QWidget | None = None):
        super().__init__(parent)
        self.setWindowTitle("Import exports into a new site folder")
        self.resize(980, 760)
        self.plan: ImportPlan | None = None
        self.outcome: ImportOutcome | None = None
        self.jobs = JobRunner(self)
        self.jobs.progressed.connect(self._on_job_progress)
        self.jobs.finished.connect(self._on_job_finished)
        self.jobs.failed.connect(self._on_job_failed)
        self.jobs.cancelled.connect(self._on_job_cancelled)
        self.jobs.idle.connect(self._on_job_idle)
        layout = QVBoxLayout(self)
        top = QHBoxLayout()
        top.addWidget(self._inputs_box(), 3)
        top.addWidget(self._site_box(), 2)
        layout.addLayout(top)
        layout.addWidget(self._columns_box())
        self.tabs = QTabWidget(self)
        self.mapping = _Table(MAPPING_HEADERS, self)
        self.unplaced = QLabel("", self)
        self.unplaced.setWordWrap(True)
        page = QWidget(self)
        lay = QVBoxLayout(page)
        lay.setContentsMargins(2, 2, 2, 2)
        lay.addWidget(self.mapping, 1)
        lay.addWidget(self.unplaced)
        self.tabs.addTab(page, "Mapping")
        self.overview = QPlainTextEdit(self)
        self.overview.setReadOnly(True)
        self.tabs.addTab(self.overview, "Exports and network")
        self.problems = _Table(PROBLEM_HEADERS, self)
        self.tabs.addTab(self.problems, "Problems")
        layout.addWidget(self.tabs, 1)
        self.status = QLabel("Choose the three exports and the new folder, then Preview.", self)
        self.status.setWordWrap(True)
        layout.addWidget(self.status)
        self.bar = QProgressBar(self)
        self.bar.setVisible(False)
        layout.addWidget(self.bar)
        buttons = QHBoxLayout()
        self.preview_button = QPushButton("Preview", self)
        self.import_button = QPushButton("Import", self)
        self.cancel_button = QPushButton("Cancel", self)
        self.open_button = QPushButton("Open the new site", self)
        close = QPushButton("Close", self)
        self.preview_button.clicked.connect(self.preview)
        self.import_button.clicked.connect(self.start_import)
        self.cancel_button.clicked.connect(self.jobs.cancel)
        self.open_button.clicked.connect(self._on_open_clicked)
        close.clicked.connect(self.reject)
        for button in (self.preview_button, self.import_button, self.cancel_button,
                       self.open_button):
            buttons.addWidget(button)
        buttons.addStretch(1)
        buttons.addWidget(close)
        layout.addLayout(buttons)
        self._refresh_buttons()

    # ---- the inputs ---------------------------------------------------------------------
    def _inputs_box(self) -> QGroupBox:
        box = QGroupBox("The exports (copied unchanged)", self)
        form = QFormLayout(box)
        self.history = _Files("Historian export files", "Historian exports (*.csv *.gz "
                              "*.parquet);;All files (*)", True, box)
        self.points = _Files("Point list", "Point lists (*.csv *.xlsx *.xlsm *.ods);;All files "
                             "(*)", False, box)
        self.network = _Files("Network: one case file, or the bus and branch tables",
                              "Networks (*.m *.cdf *.txt *.csv);;All files (*)", True, box)
        self.sheet = QLineEdit(box)
        self.sheet.setPlaceholderText("the first sheet")
        form.addRow("Historian export(s)", self.history)
        form.addRow("Point list", self.points)
        form.addRow("Sheet", self.sheet)
        form.addRow("Network", self.network)
        for files in (self.history, self.points, self.network):
            files.line.textChanged.connect(self._invalidate)
        self.sheet.textChanged.connect(self._invalidate)
        return box

    def _site_box(self) -> QGroupBox:
        box = QGroupBox("The new site", self)
        form = QFormLayout(box)
        self.folder = QLineEdit(box)
        self.folder.setPlaceholderText("a new, empty folder")
        choose = QPushButton("Choose…", box)
        choose.clicked.connect(self._on_folder_clicked)
        row = QHBoxLayout()
        row.addWidget(self.folder, 1)
        row.addWidget(choose)
        self.name = QLineEdit(box)
        self.name.setPlaceholderText("the folder's name")
        self.timezone = QComboBox(box)
        self.timezone.setEditable(True)
        self.timezone.addItems(["", *sorted(zoneinfo.available_timezones())])
        self.timezone.setToolTip("Times without an offset in the exports are read in this zone;"
                                 " it is never guessed")
        self.frequency = QComboBox(box)
        self.frequency.addItems(FREQUENCIES)
        self.base = QLineEdit(box)
        self.base.setPlaceholderText("the network file's, or 100 MVA")
        self.reference = QLineEdit(box)
        self.reference.setPlaceholderText("the file's reference bus")
        self.interval = QLineEdit(box)
        self.interval.setPlaceholderText("inferred from the exports")
        self.max_age = QLineEdit(box)
        self.max_age.setPlaceholderText("one interval (15min for report-by-exception points)")
        form.addRow("Folder", row)
        for label, widget in (("Name", self.name), ("Time zone", self.timezone),
                              ("Frequency (Hz)", self.frequency), ("Base (MVA)", self.base),
                              ("Reference bus", self.reference),
                              ("Snapshot interval", self.interval), ("Maximum age", self.max_age)):
            form.addRow(label, widget)
        for edit in (self.folder, self.name, self.base, self.reference, self.interval,
                     self.max_age):
            edit.textChanged.connect(self._invalidate)
        self.timezone.currentTextChanged.connect(self._invalidate)
        self.frequency.currentTextChanged.connect(self._invalidate)
        return box

    def _columns_box(self) -> QGroupBox:
        box = QGroupBox("Headers calibra does not recognise: which of its columns they hold", self)
        lay = QHBoxLayout(box)
        self.columns = QTableWidget(0, 2, box)
        self.columns.setHorizontalHeaderLabels(["calibra column", "the file's header"])
        self.columns.horizontalHeader().setStretchLastSection(True)
        self.columns.verticalHeader().setVisible(False)
        self.columns.setMaximumHeight(130)
        side = QVBoxLayout()
        add = QPushButton("Add", box)
        remove = QPushButton("Remove", box)
        add.clicked.connect(lambda: self.add_column())
        remove.clicked.connect(self._on_remove_column_clicked)
        side.addWidget(add)
        side.addWidget(remove)
        side.addStretch(1)
        lay.addWidget(self.columns, 1)
        lay.addLayout(side)
        return box

    def add_column(self, column: str = "", header: str = "") -> None:
        """A row of the mapping: calibra's column and the file's header (both editable)."""
        row = self.columns.rowCount()
        self.columns.insertRow(row)
        pick = QComboBox(self.columns)
        pick.addItems(["", *ALL_COLUMNS])
        pick.setCurrentText(column)
        heading = QComboBox(self.columns)
        heading.setEditable(True)
        heading.addItems(self._headers())
        heading.setCurrentText(header)
        pick.currentTextChanged.connect(self._invalidate)
        heading.currentTextChanged.connect(self._invalidate)
        self.columns.setCellWidget(row, 0, pick)
        self.columns.setCellWidget(row, 1, heading)
        self._invalidate()

    def _headers(self) -> list[str]:
        if not self.points.paths:
            return []
        return point_list_headers(self.points.paths[0], self.sheet.text().strip() or None,
                                  ProblemLog()) or []

    def _on_remove_column_clicked(self) -> None:
        row = self.columns.currentRow()
        self.columns.removeRow(row if row >= 0 else self.columns.rowCount() - 1)
        self._invalidate()

    def _on_folder_clicked(self) -> None:
        chosen, _ = QFileDialog.getSaveFileName(self, "The new site folder", self.folder.text())
        if chosen:
            self.folder.setText(chosen)

    def set_inputs(self, history: list[Path], points: Path, network: list[Path],
                   folder: Path) -> None:
        """Fill the three exports and the target (as the file choosers would)."""
        self.history.set_paths(history)
        self.points.set_paths([points])
        self.network.set_paths(network)
        self.folder.setText(str(folder))

    # ---- request, preview, import -------------------------------------------------------
    def request(self) -> ImportRequest:
        """The import the fields ask for; ValueError naming the field that cannot be read."""
        if not (self.history.paths and self.points.paths and self.network.paths):
            raise ValueError("choose the historian export(s), the point list and the network")
        folder = self.folder.text().strip()
        if not folder:
            raise ValueError("choose the new site folder")
        zone = self.timezone.currentText().strip()
        if not zone:
            raise ValueError("choose the site's time zone (times without an offset are read "
                             "in it)")
        if not self.frequency.currentText():
            raise ValueError("choose the system frequency, 50 or 60 Hz")
        columns = {}
        for row in range(self.columns.rowCount()):
            column = self.columns.cellWidget(row, 0).currentText()
            header = self.columns.cellWidget(row, 1).currentText().strip()
            if column and header:
                columns[column] = header
        fields = SiteFields(
            name=self.name.text().strip() or Path(folder).name, timezone=zone,
            frequency_hz=float(self.frequency.currentText()),
            base_mva=_number(self.base.text(), "Base (MVA)"),
            reference_bus=self.reference.text().strip() or None,
            interval=_duration(self.interval.text(), "Snapshot interval"),
            max_age=_duration(self.max_age.text(), "Maximum age"))
        return ImportRequest(Path(folder), tuple(self.history.paths), self.points.paths[0],
                             tuple(self.network.paths), fields, columns,
                             self.sheet.text().strip() or None)

    def preview(self) -> None:
        """Work out the folder in the background; nothing is written."""
        try:
            request = self.request()
        except ValueError as exc:
            self._say(str(exc))
            return
        self.plan = self.outcome = None
        self._start(PREVIEW, lambda progress: plan_import(request, progress))

    def start_import(self) -> None:
        """Build and load the folder of the previewed plan in the background."""
        plan = self.plan
        if plan is None:
            return
        self._start(IMPORT, lambda progress: run_import(plan, progress))

    def _start(self, name: str, job) -> None:
        if self.jobs.busy:
            return
        self.bar.setRange(0, 0)
        self.bar.setVisible(True)
        self._say("Reading the exports…" if name == PREVIEW else "Writing the folder…")
        self.jobs.start(name, job)
        self._refresh_buttons()

    # ---- results ------------------------------------------------------------------------
    def _on_job_progress(self, done: int, total: int, message: str) -> None:
        self.bar.setRange(0, max(total, 0))
        self.bar.setValue(min(done, max(total, 0)))
        self.bar.setFormat(f"{message} %p%")

    def _on_job_finished(self, name: str, result) -> None:
        if name == PREVIEW:
            self._show_plan(result)
        else:
            self._show_outcome(result)

    def _on_job_failed(self, name: str, exc) -> None:
        if isinstance(exc, ImportRefused):
            self._show_problems(exc.problems)
            self._say(f"The inputs cannot make a site ({len(exc.problems)} problem(s), see "
                      "Problems); nothing was written.")
        elif isinstance(exc, OSError):
            self._say(f"{exc.strerror or exc} ({exc.filename}); nothing was written.")
        else:
            self._say(f"The {name} stopped: {type(exc).__name__}: {exc}")

    def _on_job_cancelled(self, name: str) -> None:
        self._say(f"The {name} was cancelled; nothing was written.")

    def _on_job_idle(self) -> None:
        self.bar.setVisible(False)
        self._refresh_buttons()

    def _show_plan(self, plan: ImportPlan) -> None:
        self.plan = plan
        self.mapping.fill(mapping_rows(plan))
        unplaced = plan.mapping.unplaced
        self.unplaced.setText("Headers not placed (not read): "
                              + (", ".join(f"'{h}'" for h in unplaced) if unplaced else "none"))
        self.overview.setPlainText("\n".join(overview_lines(plan)))
        self._show_problems(list(plan.warnings), show=False)
        self.tabs.setCurrentIndex(0)
        self._say(f"Nothing written yet. Import copies {len(plan.copies)} files into "
                  f"{plan.request.target} with the mapping shown.")

    def _show_outcome(self, outcome: ImportOutcome) -> None:
        self.outcome, self.plan = outcome, None
        self._show_problems(outcome.problems)
        kept = f" The folder that was there is kept as {outcome.replaced}." \
            if outcome.replaced else ""
        if outcome.problems_file is not None:
            kept += f" Every problem is also in {outcome.problems_file.name} there."
        if outcome.usable:
            self._say(f"Imported into {outcome.folder}: usable, with {len(outcome.problems)} "
                      f"warning(s) (skipped or repaired values, listed).{kept}")
        else:
            self._say(f"Written to {outcome.folder}, but not usable: correct the problems "
                      f"listed (site.toml or the files) and open it again.{kept}")

    def _show_problems(self, problems: list[LoadProblem], show: bool = True) -> None:
        self.problems.fill(problem_rows(problems))
        self.tabs.setTabText(2, f"Problems ({len(problems)})")
        if problems and show:
            self.tabs.setCurrentIndex(2)

    def _on_open_clicked(self) -> None:
        if self.outcome is not None and self.outcome.usable:
            self.site_ready.emit(self.outcome.folder)
            self.accept()

    def _invalidate(self, *_) -> None:
        if self.plan is not None and not self.jobs.busy:
            self.plan = None
            self._say("The inputs changed: Preview again before importing.")
        self._refresh_buttons()

    def _refresh_buttons(self) -> None:
        busy = self.jobs.busy
        self.preview_button.setEnabled(not busy)
        self.import_button.setEnabled(not busy and self.plan is not None)
        self.cancel_button.setEnabled(busy)
        self.open_button.setEnabled(not busy and self.outcome is not None
                                    and self.outcome.usable)

    def _say(self, text: str) -> None:
        self.status.setText(text)

    def reject(self) -> None:
        self.jobs.shutdown()
        super().reject()


def _number(text: str, field: str) -> float | None:
    text = text.strip()
    if not text:
        return None
    try:
        return float(text)
    except ValueError:
        raise ValueError(f"{field}: '{text}' is not a number") from None


def _duration(text: str, field: str) -> pd.Timedelta | None:
    if not text.strip():
        return None
    value = positive_duration(text)
    if value is None:
        raise ValueError(f"{field}: '{text.strip()}' is not a duration such as 30s, 1min or "
                         "15min")
    return value
