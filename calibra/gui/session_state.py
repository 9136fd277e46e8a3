"""What the desktop session holds, free of Qt: the open site, its ledger and settings, the
reviews of this session, the selected finding and point, the list's filter and the review
period.

Actions change the state through its methods; each method makes one change and then tells
every observer once which part changed (a :class:`Change`). The window's widgets observe it
and redraw from it, so no action refreshes a widget by hand, and tests drive it headless.
"""

from __future__ import annotations

from collections.abc import Callable
from enum import Enum

import pandas as pd

from calibra.app_settings import SiteSettings
from calibra.gui.findings_view import FindingFilter, FindingsView, commissioning_substations
from calibra.gui.point_trace import PointTrace, point_trace
from calibra.gui.run_compare import RunFigures, run_figures
from calibra.ledger import Ledger
from calibra.model.site import Site
from calibra.review_run import ReviewRun

Period = tuple[pd.Timestamp | None, pd.Timestamp | None]


class Change(Enum):
    """Which part of the session changed."""

    SITE = "site"  #: another site was opened: ledger, settings, findings, selection anew
    REVIEW = "review"  #: a review finished
    LEDGER = "ledger"  #: an action was written to the ledger
    SELECTION = "selection"  #: another finding or point was selected
    FILTER = "filter"  #: the findings list's filter
    PERIOD = "period"  #: the review period
    SETTINGS = "settings"  #: the site's review settings
    CLOSED = "closed"  #: the session ended; the ledger is closed


Observer = Callable[[Change], object]


class Observers:
    """Callbacks called with each change, in the order they were connected."""

    def __init__(self) -> None:
        self._callbacks: list[Observer] = []

    def connect(self, callback: Observer) -> None:
        if callback not in self._callbacks:
            self._callbacks.append(callback)

    def disconnect(self, callback: Observer) -> None:
        self._callbacks.remove(callback)

    def emit(self, change: Change) -> None:
        for callback in list(self._callbacks):
            callback(change)


class SessionState:
    """One desktop session. Read the fields; change them through the methods."""

    def __init__(self) -> None:
        self.site: Site | None = None
        self.ledger: Ledger | None = None
        self.settings = SiteSettings()
        self.run: ReviewRun | None = None
        self.figures: list[RunFigures] = []  #: one per review of this session, oldest first
        self.finding_id: str | None = None
        self.tag: str | None = None
        self.view = FindingsView()
        self.period: Period = (None, None)  #: None: from the first / to the last snapshot
        self.changed = Observers()

    # ---- actions ------------------------------------------------------------------------
    def open_site(self, site: Site, ledger: Ledger, settings: SiteSettings) -> None:
        """Work on ``site`` with its ``ledger`` (owned from now on) over all its snapshots."""
        if self.ledger is not None:
            self.ledger.close()
        self.site, self.ledger, self.settings = site, ledger, settings
        self.run, self.figures = None, []
        self.period = (None, None)
        self.finding_id, self.tag = None, None
        self.view = FindingsView(commissioning_substations(site.points, site.snapshots))
        self.view.set_ledger(ledger.findings())
        self.changed.emit(Change.SITE)

    def review_finished(self, run: ReviewRun) -> None:
        """The latest review, with the ledger's states as they are now."""
        self.run = run
        self.figures.append(run_figures(run))
        self.view.set_review(run.findings)
        self._read_ledger()
        self.changed.emit(Change.REVIEW)

    def ledger_written(self) -> None:
        """An action was written to the ledger: read its states again."""
        self._read_ledger()
        self.changed.emit(Change.LEDGER)

    def select(self, finding_id: str | None, tag: str | None) -> None:
        """Select a finding (with its point), or a point alone (``finding_id`` None)."""
        if (finding_id, tag) == (self.finding_id, self.tag):
            return
        self.finding_id, self.tag = finding_id, tag
        self.changed.emit(Change.SELECTION)

    def set_filter(self, wanted: FindingFilter) -> None:
        """What the findings list shows."""
        if wanted == self.view.filter:
            return
        self.view.filter = wanted
        self.changed.emit(Change.FILTER)

    def set_period(self, start: pd.Timestamp | None, end: pd.Timestamp | None) -> None:
        """Review ``start``…``end`` (UTC) from now on."""
        self.period = (start, end)
        self.changed.emit(Change.PERIOD)

    def set_settings(self, settings: SiteSettings) -> None:
        """The site's review settings (as saved with the site)."""
        self.settings = settings
        self.changed.emit(Change.SETTINGS)

    def close(self) -> None:
        """Close the ledger; the session holds nothing to write to any more."""
        if self.ledger is None:
            return
        self.ledger.close()
        self.ledger = None
        self.changed.emit(Change.CLOSED)

    def _read_ledger(self) -> None:
        if self.ledger is not None:
            self.view.set_ledger(self.ledger.findings())

    # ---- what the views show ------------------------------------------------------------
    def finding_row(self) -> pd.Series | None:
        """The selected finding as the list holds it (with its ledger state), or None."""
        return self.view.row(self.finding_id) if self.finding_id else None

    def trace(self) -> PointTrace | None:
        """The selected point's week from the latest review, with the corrections it
        applied; None before a review or when the review did not judge the point."""
        if self.site is None or self.run is None or self.tag is None:
            return None
        return point_trace(self.site, self.run.result, self.tag, self.run.corrections)

    def history(self) -> pd.DataFrame | None:
        """The ledger's actions on the selected point; None when the ledger has no finding
        on it."""
        table = self.view.table()
        if self.ledger is None or self.tag is None or not (table["tag"] == self.tag).any():
            return None
        return self.ledger.history(tag=self.tag)

    def compared_figures(self) -> tuple[RunFigures | None, RunFigures | None]:
        """(the review before the latest, the latest) of this session."""
        if not self.figures:
            return None, None
        return (self.figures[-2] if len(self.figures) > 1 else None), self.figures[-1]

    def work_order_findings(self) -> pd.DataFrame:
        """The findings behind the work orders, with the ledger's current states."""
        states = self.ledger.findings()["state"] if self.ledger is not None else pd.Series()
        if self.run is not None:
            table = self.run.findings.copy()
            table["state"] = table["finding_id"].map(states).fillna(table["state"])
            return table
        if self.ledger is None:
            return pd.DataFrame()
        return self.ledger.findings().reset_index()
