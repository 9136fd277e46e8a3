"""The main window: findings on the left, the selected point's week in the middle, where it
sits and what is known about it on the right; loading and reviews run in a worker thread."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
from PySide6.QtCore import Qt
from PySide6.QtGui import QAction, QCloseEvent, QKeySequence
from PySide6.QtWidgets import (
    QFileDialog,
    QInputDialog,
    QMainWindow,
    QMessageBox,
    QSplitter,
    QWidget,
)

import calibra
from calibra.app_settings import (
    RecentSites,
    SettingsError,
    SiteSettings,
    load_site_settings,
    save_site_settings,
    settings_path,
)
from calibra.gui.findings_view import FindingsView
from calibra.gui.qt_details import DetailTabs
from calibra.gui.qt_device_actions import DeviceActions
from calibra.gui.qt_diagram import DiagramPanel
from calibra.gui.qt_dialogs import ABOUT_HTML, ProblemsDialog, Prompts, SettingsDialog
from calibra.gui.qt_findings import FindingsPanel
from calibra.gui.qt_import import ImportDialog
from calibra.gui.qt_jobs import JobRunner
from calibra.gui.qt_plots import PlotPanel
from calibra.gui.qt_point_actions import PointActions
from calibra.gui.qt_status import StatusArea
from calibra.gui.qt_style import app_icon
from calibra.gui.qt_tools import WindowTools
from calibra.gui.run_compare import RunFigures
from calibra.gui.session_state import Change, SessionState
from calibra.io import load_site
from calibra.ledger import Ledger
from calibra.model.points import end_place, quantity_words
from calibra.model.site import Site, SiteLoadError
from calibra.review_run import ReviewRun, run_review


def window_title(site_name: str | None) -> str:
    """The window title: the site, then the application's name once. It ends with the name, so
    platforms that append the application's display name add nothing more."""
    return f"{site_name} — calibra" if site_name else "calibra"


class MainWindow(QMainWindow):
    """calibra's main window. ``review_on_open`` starts a review once a site is loaded."""

    def __init__(self, recent: RecentSites | None = None, review_on_open: bool = True):
        super().__init__()
        self.setWindowTitle(window_title(None))
        self.setWindowIcon(app_icon())
        self.resize(1560, 920)
        self.recent = recent or RecentSites()
        self.review_on_open = review_on_open
        self.state = SessionState()
        self.prompts = Prompts(self)
        self.dialogs: list[QWidget] = []  # non-modal dialogs kept alive
        self.jobs = JobRunner(self)
        self.import_dialog: ImportDialog | None = None
        self._build()
        self.state.changed.connect(self._on_state_changed)
        self.jobs.progressed.connect(self._on_job_progress)
        self.jobs.finished.connect(self._on_job_finished)
        self.jobs.failed.connect(self._on_job_failed)
        self.jobs.cancelled.connect(self._on_job_cancelled)
        self.jobs.idle.connect(self._on_job_idle)
        self._show_busy(False)
        self._draw_point()

    # ---- the session, read from its state -----------------------------------------------
    # Read-only: actions change the session through ``self.state``, whose changes redraw.
    @property
    def site(self) -> Site | None:
        return self.state.site

    @property
    def ledger(self) -> Ledger | None:
        return self.state.ledger

    @property
    def settings(self) -> SiteSettings:
        return self.state.settings

    @property
    def run(self) -> ReviewRun | None:
        return self.state.run

    @property
    def figures(self) -> list[RunFigures]:
        return self.state.figures

    @property
    def view(self) -> FindingsView:
        return self.state.view

    @property
    def current_finding(self) -> str | None:
        return self.state.finding_id

    @property
    def current_tag(self) -> str | None:
        return self.state.tag

    # ---- layout -------------------------------------------------------------------------
    def _build(self) -> None:
        self.findings = FindingsPanel(self.state, self)
        self.plots = PlotPanel(self)
        self.diagram = DiagramPanel(self)
        self.details = DetailTabs(self)
        right = QSplitter(Qt.Vertical, self)
        right.addWidget(self.diagram)
        right.addWidget(self.details)
        right.setSizes([380, 480])
        main = QSplitter(Qt.Horizontal, self)
        main.addWidget(self.findings)
        main.addWidget(self.plots)
        main.addWidget(right)
        main.setSizes([470, 690, 400])
        main.setStretchFactor(1, 1)
        self.setCentralWidget(main)
        self.status = StatusArea(self)
        self.message, self.progress = self.status.message, self.status.progress
        self.cancel_button = self.status.cancel_button
        self.cancel_button.clicked.connect(self.cancel_job)
        self.findings.findingSelected.connect(self._on_finding_selected)
        self.diagram.view.meterClicked.connect(self._on_meter_clicked)
        self.point_actions = PointActions(self)
        self.device_actions = DeviceActions(self)
        self.tools = WindowTools(self)
        self._build_menus()

    def _action(self, text: str, handler, shortcut=None, tip: str = "") -> QAction:
        action = QAction(text, self)
        if shortcut is not None:
            action.setShortcut(QKeySequence(shortcut))
        action.setStatusTip(tip)
        action.triggered.connect(lambda _=False: handler())
        return action

    def _build_menus(self) -> None:
        a = self.point_actions.actions
        self.open_action = self._action("Open site…", self._on_open_clicked, QKeySequence.Open,
                                        "Open a site folder")
        self.review_action = self._action("Run review", self.start_review, "F5",
                                          "Review the period with the ledger's corrections")
        self.settings_action = self._action("Review settings…", self._on_settings_clicked,
                                            "Ctrl+,", "Thresholds saved with the site")
        self.orders_action = self._action("Work orders…", self._on_work_orders_clicked,
                                          QKeySequence.Print, "Field checklists per substation")
        self.goto_action = self._action("Go to point…", self._on_goto_clicked, "Ctrl+G",
                                        "Show any point of the site")
        menu = self.menuBar()
        site_menu = menu.addMenu("&Site")
        site_menu.addAction(self.open_action)
        site_menu.addAction(self._action("Import exports…", self.show_import_dialog, tip=(
            "Build a new site folder from a historian export, a point list and a network")))
        self.recent_menu = site_menu.addMenu("Recent sites")
        site_menu.addSeparator()
        site_menu.addAction(self._action("Quit", self.close, QKeySequence.Quit))
        review = menu.addMenu("&Review")
        t = self.tools
        for action in (self.review_action, t.period_action, self.settings_action,
                       self.orders_action, t.csv_action, t.plot_action):
            review.addAction(action)
        point = menu.addMenu("&Point")
        point.addAction(self.goto_action)
        for name in ("next", "previous", None, "confirm", "reversed", "scale", "offset",
                     "repaired", "dismiss", "note", None, "set_model", "keep_model", None,
                     "undo"):
            point.addSeparator() if name is None else point.addAction(a[name])
        point.addSeparator()
        point.addAction(self.device_actions.correct_action)
        point.addAction(self.device_actions.confirm_action)
        help_menu = menu.addMenu("&Help")
        help_menu.addAction(t.guide_action)
        help_menu.addAction(self._action("Keyboard shortcuts", self._on_shortcuts_clicked))
        help_menu.addAction(self._action("About calibra", self._on_about_clicked))
        tools = self.addToolBar("Main")
        tools.setObjectName("mainToolbar")
        tools.setMovable(False)
        for action in (self.open_action, self.review_action, None, a["previous"], a["next"],
                       None, a["confirm"], a["reversed"], a["scale"], a["repaired"],
                       a["dismiss"], a["note"], a["undo"], None, self.orders_action):
            tools.addSeparator() if action is None else tools.addAction(action)
        self._fill_recent()

    def _fill_recent(self) -> None:
        self.recent_menu.clear()
        folders = self.recent.folders()
        for folder in folders:
            self.recent_menu.addAction(self._action(str(folder),
                                                    lambda f=folder: self.open_site(f)))
        self.recent_menu.setEnabled(bool(folders))

    # ---- messages and progress ----------------------------------------------------------
    def say(self, text: str, warn: bool = False) -> None:
        """A message in the status bar (and a non-blocking box for warnings)."""
        self.message.setText(text)
        if warn:
            box = QMessageBox(QMessageBox.Warning, "calibra", text, QMessageBox.Ok, self)
            box.setModal(False)
            box.show()
            self._keep(box)

    def _keep(self, widget: QWidget) -> None:
        self.dialogs = [d for d in self.dialogs if d.isVisible()] + [widget]

    def _show_busy(self, busy: bool) -> None:
        self.progress.setVisible(busy)
        self.cancel_button.setVisible(busy)
        self.cancel_button.setEnabled(busy)
        for action in (self.open_action, self.review_action, self.settings_action):
            action.setEnabled(not busy)
        self.review_action.setEnabled(not busy and self.site is not None)
        self.recent_menu.setEnabled(not busy and bool(self.recent.folders()))

    def _on_job_progress(self, done: int, total: int, message: str) -> None:
        self.progress.setRange(0, max(total, 1))
        self.progress.setValue(min(done, max(total, 1)))
        self.message.setText(f"{self.jobs.name}: {message}")

    def cancel_job(self) -> None:
        """Stop the running job at its next progress step."""
        self.jobs.cancel()
        self.cancel_button.setEnabled(False)
        self.message.setText(f"{self.jobs.name}: stopping…")

    def _on_job_idle(self) -> None:
        self._show_busy(False)

    def _on_job_cancelled(self, name: str) -> None:
        self.say(f"{name} cancelled; nothing was changed.")

    def _on_job_failed(self, name: str, exc: object) -> None:
        if isinstance(exc, SiteLoadError):
            dialog = ProblemsDialog("The site could not be loaded", exc.problems, self)
            dialog.setModal(False)
            dialog.show()
            self._keep(dialog)
            self.problems_dialog = dialog
            self.say(f"Could not load the site: {len(exc.problems)} problem(s) listed.")
            return
        self.say(f"{name} failed: {exc}", warn=True)

    def _on_job_finished(self, name: str, result: object) -> None:
        if name == "loading":
            self._apply_site(result)
        elif name == "review":
            self._apply_run(result)

    # ---- site -------------------------------------------------------------------------
    def _on_open_clicked(self) -> None:
        start = str(self.site.path) if self.site is not None and self.site.path else ""
        folder = QFileDialog.getExistingDirectory(self, "Open a site folder", start)
        if folder:
            self.open_site(Path(folder))

    def show_import_dialog(self) -> ImportDialog:
        """The import dialog; the site it builds is opened here when the user asks."""
        dialog = self.import_dialog = ImportDialog(self)
        dialog.site_ready.connect(self.open_site)
        dialog.show()
        return dialog

    def open_site(self, folder: str | Path) -> None:
        """Load a site folder in the background; problems are listed if it is not usable."""
        if self.jobs.busy:
            self.say("Wait for the running job to finish or cancel it.")
            return
        folder = Path(folder)
        self.say(f"Loading {folder}…")
        self.progress.setRange(0, 0)
        self._show_busy(True)
        self.jobs.start("loading", lambda progress: load_site(folder))

    def _apply_site(self, site: Site) -> None:
        settings_problem = ""
        try:
            settings = load_site_settings(site.path)
        except SettingsError as exc:
            settings = SiteSettings()
            settings_problem = f"{exc}. Using the default settings until they are saved again."
        # A new site is reviewed over all its snapshots, with nothing selected.
        self.state.open_site(site, Ledger.for_site(site.path), settings)
        self.recent.add(site.path)
        self._fill_recent()
        self.setWindowTitle(window_title(site.name))
        n = len(site.problems)
        self.say(f"Loaded {site.name}" + (f" with {n} load warning(s) (see Site)" if n else ""))
        if settings_problem:
            self.say(settings_problem, warn=True)
        self._show_busy(False)
        if self.review_on_open:
            self.start_review()

    # ---- review -----------------------------------------------------------------------
    def start_review(self) -> None:
        """Run the review in the background with the site's settings and ledger."""
        site = self.site
        if site is None or self.jobs.busy:
            return
        settings = self.settings.review_settings()
        folder = site.path
        start, end = self.state.period

        def job(progress):
            with Ledger.for_site(folder) as ledger:  # this thread's own connection
                return run_review(site, settings, start, end, ledger=ledger,
                                  progress=progress)

        self.progress.setRange(0, 0)
        self._show_busy(True)
        self.say("review: starting…")
        self.jobs.start("review", job)

    def _apply_run(self, run: ReviewRun) -> None:
        self.state.review_finished(run)
        before = self.state.compared_figures()[0]
        s = run.result.summary
        text = (f"Review done in {run.seconds:.1f} s: {len(run.findings)} finding(s), "
                f"{s.chi2_failed:,} chi-square failure(s) of {s.converged:,} "
                f"estimated snapshots")
        if before is not None:
            after = self.figures[-1]
            text += (f" — before/after: chi-square failures with every point in "
                     f"{before.chi2_failed_all_in} → {after.chi2_failed_all_in}, findings "
                     f"{before.findings} → {after.findings} (see Reviews)")
        self.say(text)
        if self.current_tag is None:
            self.findings.step(1)

    # ---- views drawn from the state -----------------------------------------------------
    def _on_state_changed(self, change: Change) -> None:
        """Redraw what shows the part of the session that changed (the findings list
        observes the state itself)."""
        state = self.state
        if change is Change.SITE:
            site = state.site
            self.diagram.set_site(site, state.view.focus)
            self.details.show_site(site)
            self.details.setCurrentWidget(self.details.site_page)  # what was loaded, first
            self.details.show_runs(None, None)
            self._draw_point()
        elif change is Change.REVIEW:
            self.diagram.set_result(state.run.result)
            self.details.show_runs(*state.compared_figures())
            if self.details.currentWidget() is self.details.site_page:
                self.details.setCurrentWidget(self.details.point)
            if state.tag is not None:
                self._draw_point()
        elif change in (Change.SELECTION, Change.LEDGER):
            self._draw_point()

    def _draw_point(self) -> None:
        """Show the selected point everywhere: plots, diagram, details, history."""
        state = self.state
        site, tag = state.site, state.tag
        if site is None or tag is None:
            self.plots.show_trace(None, "Select a finding in the list")
            self.details.show_point(None, None, None)
            self.details.show_history(None, "UTC")
            self.diagram.show_point(None, set())
            return
        row = state.finding_row()
        if tag not in site.points.index:
            # A finding about an RTU (its clock): no week of its own; its points are listed.
            what = "" if row is None else f" — {row['finding']}, {row['state']}"
            about = "the network model" if row is not None and row["finding"] == "model" \
                else "the RTU"
            self.plots.show_trace(None, f"{tag}{what} — a finding about {about}, not a point: "
                                        "select one of its points to see its week")
            self.details.show_point(site, tag, row)
            self.details.show_history(state.history(), site.timezone)
            self.diagram.show_point(None, state.view.flagged_tags())
            return
        pt = site.points.loc[tag]
        place = end_place(site.network.buses, site.network.branches, str(pt["element"]),
                          str(pt.get("end", "") or ""))
        head = f"{tag} — {quantity_words(str(pt['quantity']), str(pt['element']), place)}"
        if row is not None:
            head += f" — {row['finding']}, {row['state']}"
        trace = state.trace()
        if trace is None:
            why = ("run the review to see its week" if state.run is None
                   else "the review does not judge this point")
            self.plots.show_trace(None, f"{head} — {why}")
        else:
            self.plots.show_trace(trace, head)
        self.details.show_point(site, tag, row)
        self.details.show_history(state.history(), site.timezone)
        self.diagram.show_point(tag, state.view.flagged_tags())

    # ---- selection ----------------------------------------------------------------------
    def _on_finding_selected(self, finding_id: str, tag: str) -> None:
        self.state.select(finding_id, tag)

    def _on_meter_clicked(self, tag: str) -> None:
        table = self.view.table()
        hits = table[table["tag"] == tag]
        if len(hits) and self.findings.select(hits.iloc[0]["finding_id"]):
            return
        self.state.select(None, tag)

    def _on_goto_clicked(self) -> None:
        if self.site is None:
            return
        tags = sorted(self.site.points.index)
        tag, ok = QInputDialog.getItem(self, "Go to point", "Point tag:", tags, 0, True)
        if ok and tag in self.site.points.index:
            self._on_meter_clicked(tag)

    def report_written(self, message: str) -> None:
        """Say that an action was written to the ledger (the state tells the views)."""
        self.say(message + " — written to the ledger; re-run the review (F5) to see the effect")

    # ---- settings, work orders, help ----------------------------------------------------
    def _on_settings_clicked(self) -> None:
        if self.site is None:
            self.say("Open a site first: settings are saved with the site.")
            return
        dialog = SettingsDialog(self.settings, str(settings_path(self.site.path)), self)
        if dialog.exec():
            self.save_settings(dialog.values())

    def save_settings(self, settings: SiteSettings) -> None:
        """Keep and save the site's review settings."""
        try:
            path = save_site_settings(self.site.path, settings)
        except (SettingsError, OSError) as exc:
            self.say(f"Settings not saved: {exc}", warn=True)
            return
        self.state.set_settings(settings)
        self.say(f"Settings saved to {path}; they apply from the next review.")

    def work_order_findings(self) -> pd.DataFrame:
        """The findings behind the work orders, with the ledger's current states."""
        return self.state.work_order_findings()

    def work_orders_dialog(self):
        """A work-order dialog for the current findings (not shown)."""
        from calibra.gui.qt_work_orders import WorkOrdersDialog

        period = None
        if self.run is not None:
            period = (self.run.result.period_start.tz_convert(self.site.timezone),
                      self.run.result.period_end.tz_convert(self.site.timezone))
        return WorkOrdersDialog(self.site, self.work_order_findings(), period, self)

    def _on_work_orders_clicked(self) -> None:
        if self.site is None:
            self.say("Open a site first.")
            return
        self.work_orders_dialog().exec()

    def _on_shortcuts_clicked(self) -> None:
        rows = [(a.text().replace("&", ""), a.shortcut().toString())
                for a in self.findChildren(QAction) if not a.shortcut().isEmpty()]
        text = "".join(f"<tr><td>{t}</td><td><b>{k}</b></td></tr>" for t, k in sorted(rows))
        QMessageBox.information(self, "Keyboard shortcuts", f"<table>{text}</table>")

    def _on_about_clicked(self) -> None:
        box = QMessageBox(self)
        box.setWindowTitle("About calibra")
        box.setIconPixmap(app_icon().pixmap(64, 64))
        box.setText(ABOUT_HTML.format(version=calibra.__version__))
        box.exec()

    def closeEvent(self, event: QCloseEvent) -> None:  # noqa: N802 (Qt API)
        if self.jobs.busy:
            self.hide()  # the job stops at its next progress step; do not look frozen meanwhile
        self.jobs.shutdown()
        self.state.close()
        super().closeEvent(event)
