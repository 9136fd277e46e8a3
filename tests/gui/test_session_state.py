"""The desktop session's state without Qt: each change tells every observer once, actions
update what the views read, and the plot takes the applied corrections from the review run.

Ground truth: the small site's seeded fault (both power channels of device BRN.110.MRG1
written negated by the simulator) and the site's own snapshot files.
"""

from __future__ import annotations

import dataclasses
import sqlite3
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from calibra.app_settings import SiteSettings
from calibra.gui.findings_view import FindingFilter
from calibra.gui.point_trace import corrected_snapshots, point_trace
from calibra.gui.session_state import Change, Observers, SessionState
from calibra.io import load_site
from calibra.ledger import Correction, Ledger
from tests.gui.conftest import REVERSED_TAGS, finite_equal, raw_values

MW, MVAR = REVERSED_TAGS
FID = f"{MW}|reversed"


class Recorder:
    """An observer that keeps every change it was told of."""

    def __init__(self, state: SessionState):
        self.changes: list[Change] = []
        state.changed.connect(self.changes.append)

    def take(self) -> list[Change]:
        out, self.changes[:] = list(self.changes), []
        return out


@pytest.fixture
def opened(site_folder, reviewed):
    """A state with the small site's copy open, its ledger holding the review's findings."""
    _, run = reviewed
    site = load_site(site_folder)
    ledger = Ledger.for_site(site_folder)
    index = run.result.evidence.index
    ledger.record_review(run.result.findings, index[0], index[-1], {}, {})
    state = SessionState()
    state.open_site(site, ledger, SiteSettings())
    yield state, run
    state.close()


def test_state_imports_without_qt():
    """The state, the list's view and the plot arrays load where Qt cannot be imported."""
    blocked = "; ".join(f"sys.modules[{m!r}] = None" for m in ("PySide6", "pyqtgraph",
                                                                "shiboken6"))
    code = f"import sys; {blocked}; import calibra.gui.session_state; print('ok')"
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          timeout=120)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == "ok"


def test_observers_called_in_order_and_disconnected():
    seen: list[tuple[str, Change]] = []
    observers = Observers()

    def first(change):
        seen.append(("first", change))

    def second(change):
        seen.append(("second", change))

    observers.connect(first)
    observers.connect(second)
    observers.connect(first)  # connecting twice does not call twice
    observers.emit(Change.FILTER)
    observers.disconnect(first)
    observers.emit(Change.PERIOD)
    assert seen == [("first", Change.FILTER), ("second", Change.FILTER),
                    ("second", Change.PERIOD)]


def test_opening_a_site_is_one_change(site_folder, reviewed):
    site = load_site(site_folder)
    state = SessionState()
    state.select("X|stuck", "X")
    state.set_period(site.snapshots.index[0], site.snapshots.index[-1])
    recorder = Recorder(state)
    first = Ledger.for_site(site_folder)
    state.open_site(site, first, SiteSettings(confidence=0.995))
    assert recorder.take() == [Change.SITE]
    assert state.site is site and state.ledger is first and state.run is None
    assert state.settings.confidence == 0.995
    # A new site starts over: nothing selected, its whole period, no review yet.
    assert (state.finding_id, state.tag) == (None, None) and state.period == (None, None)
    assert state.view.focus == ["NRC"]  # the point list's notes mark NRC as commissioning
    assert state.trace() is None and state.compared_figures() == (None, None)
    # Opening again closes the ledger it held (one owner).
    second = Ledger.for_site(site_folder)
    state.open_site(site, second, SiteSettings())
    with pytest.raises(sqlite3.ProgrammingError, match="closed"):
        first.findings()
    state.close()
    assert state.ledger is None and recorder.take() == [Change.SITE, Change.CLOSED]
    state.close()  # once closed, closing again changes nothing
    assert recorder.take() == []


def test_review_selection_and_filter_each_notify_once(opened):
    state, run = opened
    recorder = Recorder(state)
    state.review_finished(run)
    assert recorder.take() == [Change.REVIEW]
    assert state.run is run and len(state.figures) == 1 and state.view.has_review
    assert state.compared_figures() == (None, state.figures[0])
    state.select(FID, MW)
    state.select(FID, MW)  # the same selection again is no change
    assert recorder.take() == [Change.SELECTION]
    assert state.finding_row()["finding"] == "reversed"
    assert state.history() is not None and len(state.history()) > 0
    trace = state.trace()
    assert trace is not None and trace.tag == MW and trace.raw is None  # nothing corrected
    state.set_filter(FindingFilter(kind="reversed"))
    state.set_filter(FindingFilter(kind="reversed"))
    assert recorder.take() == [Change.FILTER]
    assert set(state.view.visible()["finding_id"]) == {FID, f"{MVAR}|reversed"}
    state.review_finished(run)
    assert recorder.take() == [Change.REVIEW]
    assert state.compared_figures() == (state.figures[0], state.figures[1])


def test_a_ledger_action_updates_what_the_views_read(opened):
    state, run = opened
    state.review_finished(run)
    state.select(FID, MW)
    recorder = Recorder(state)
    assert state.finding_row()["state"] == "new"
    state.ledger.mark_reversed(MW)
    assert state.finding_row()["state"] == "new"  # not read again yet
    state.ledger_written()
    assert recorder.take() == [Change.LEDGER]
    assert state.finding_row()["state"] == "corrected"
    assert "mark_reversed" in set(state.history()["action"])
    assert MW not in state.view.flagged_tags()
    orders = state.work_order_findings().set_index("finding_id")
    assert orders.at[FID, "state"] == "corrected"


def test_period_and_settings_changes(opened):
    state, _ = opened
    recorder = Recorder(state)
    start = pd.Timestamp("2027-03-01 02:00", tz="UTC")
    state.set_period(start, None)
    state.set_settings(SiteSettings(min_snapshots=50))
    assert recorder.take() == [Change.PERIOD, Change.SETTINGS]
    assert state.period == (start, None) and state.settings.min_snapshots == 50


def test_trace_takes_the_applied_corrections_from_the_run(reviewed, site_template):
    site, run = reviewed
    index = run.result.evidence.index
    received = raw_values(site_template, MW, index)
    reversed_ = Correction(MW, -1.0, 0.0)
    trace = point_trace(site, run.result, MW, [reversed_])
    assert finite_equal(trace.raw, received)
    # Not shown: a correction of another point, one that changes nothing, one whose window
    # ends before the reviewed period.
    before = Correction(MW, -1.0, 0.0, valid_until=index[0])
    for other in ([Correction(MVAR, -1.0, 0.0)], [Correction(MW, 1.0, 0.0)], [before]):
        assert point_trace(site, run.result, MW, other).raw is None
    # A window covering part of the period marks those snapshots only.
    half = Correction(MW, 1.0, 2.5, valid_from=index[100], valid_until=index[200])
    mask = corrected_snapshots([half, Correction(MVAR, -1.0, 0.0)], MW, index)
    assert mask.sum() == 100 and mask[100:200].all()
    assert point_trace(site, run.result, MW, [half]).raw is not None


def test_trace_without_values_in_the_corrected_window_keeps_no_raw(reviewed):
    site, run = reviewed
    ev = run.result.evidence
    i = ev.model.tags.get_loc(MW)
    measured = ev.measured.copy()
    measured[:300, i] = np.nan  # as when a repair inside the period leaves only later data
    result = dataclasses.replace(run.result, evidence=dataclasses.replace(ev,
                                                                          measured=measured))
    early = Correction(MW, -1.0, 0.0, valid_until=ev.index[300])
    assert point_trace(site, result, MW, [early]).raw is None
    assert point_trace(site, result, MW, [Correction(MW, -1.0, 0.0)]).raw is not None
