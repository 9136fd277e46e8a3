"""The main window's actions change the session state, and its widgets redraw from it."""

from __future__ import annotations

import pandas as pd

from calibra.gui.session_state import Change
from tests.gui.conftest import REVERSED_TAGS, open_and_wait, review_and_wait

MW, MVAR = REVERSED_TAGS


def _row_state(window, finding_id: str) -> str:
    """The State column of one finding as the tree shows it."""
    index = window.findings._find(finding_id)
    return index.siblingAtColumn(3).data()


def test_actions_change_the_state_and_views_follow(qtbot, window, site_folder):
    changes: list[Change] = []
    window.state.changed.connect(changes.append)
    open_and_wait(qtbot, window, site_folder)
    assert changes == [Change.SITE] and window.state.site is window.site
    review_and_wait(qtbot, window)
    # The review, then the first finding of the list selected for the engineer.
    assert changes[1:] == [Change.REVIEW, Change.SELECTION]
    changes.clear()

    assert window.findings.select(f"{MW}|reversed")
    assert changes == [Change.SELECTION]
    assert (window.state.finding_id, window.state.tag) == (f"{MW}|reversed", MW)
    assert window.plots.title.text().startswith(MW) and "new" in window.plots.title.text()
    changes.clear()

    window.point_actions.actions["reversed"].trigger()
    assert changes == [Change.LEDGER]
    assert window.state.finding_row()["state"] == "corrected"
    assert _row_state(window, f"{MW}|reversed") == "corrected"  # the list redrew
    assert "corrected" in window.plots.title.text()  # so did the plot heading
    changes.clear()

    window.findings.kind.setCurrentIndex(window.findings.kind.findData("reversed"))
    assert changes == [Change.FILTER] and window.state.view.filter.kind == "reversed"
    changes.clear()

    window.device_actions.confirm_action.trigger()  # MVAR of the same device is still new
    assert changes == [Change.LEDGER]
    assert window.state.view.row(f"{MVAR}|reversed")["state"] == "confirmed"
    changes.clear()

    start = window.site.snapshots.index[0] + pd.Timedelta(hours=2)
    end = window.site.snapshots.index[-1]
    with qtbot.waitSignals([window.jobs.finished, window.jobs.idle], timeout=90000):
        window.tools.set_period(start, end)
    assert changes[:2] == [Change.PERIOD, Change.REVIEW] and window.state.period == (start, end)
    assert window.run.result.period_start >= start
