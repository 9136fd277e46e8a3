"""The main window driven end to end on a small generated site: review, select, correct in the
ledger, re-run, compare; cancel; a broken site; screenshots that are not blank.

The ground truth is the simulator's seeded fault (both power channels of device BRN.110.MRG1
written negated) and the site's own snapshot files, not the window's own arithmetic.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
from PySide6.QtCore import Qt
from PySide6.QtGui import QImage

from calibra.ledger import Ledger
from tests.gui.conftest import (
    REVERSED_TAGS,
    finite_equal,
    open_and_wait,
    raw_values,
    review_and_wait,
)

MW, MVAR = REVERSED_TAGS


def _fid(tag: str, kind: str = "reversed") -> str:
    return f"{tag}|{kind}"


def test_review_correct_rerun(qtbot, window, site_folder):
    open_and_wait(qtbot, window, site_folder)
    assert window.site is not None and window.run is None
    assert "Small test grid" in window.windowTitle()
    # What was loaded is shown first: counts, span, missing data (the site's own files:
    # twelve hours of one-minute snapshots, 40 buses in the invented grid).
    summary = window.details.site_text.toPlainText()
    assert window.details.currentWidget() is window.details.site_page
    assert "40 buses" in summary and "snapshots: 720" in summary and "missing" in summary
    review_and_wait(qtbot, window)
    first = window.run
    found = set(first.findings["finding_id"])
    assert {_fid(MW), _fid(MVAR)} <= found
    assert {_fid(MW), _fid(MVAR)} <= set(window.findings.leaf_ids())

    # Select the reversed MW point: the curves hold its evidence arrays.
    assert window.findings.select(_fid(MW))
    assert window.current_tag == MW
    ev = first.result.evidence
    i = ev.model.tags.get_loc(MW)
    curves = window.plots.curves
    assert finite_equal(curves["measured"].yData, ev.measured[:, i])
    assert finite_equal(curves["implied"].yData, ev.implied[:, i])
    raw = raw_values(site_folder, MW, ev.index)
    assert finite_equal(curves["measured"].yData, raw)  # no correction yet
    assert np.nanmedian(curves["measured"].yData * curves["implied"].yData) < 0  # opposite signs

    # Mark both channels of the device reversed (toolbar action, then next finding).
    window.point_actions.actions["reversed"].trigger()
    assert window.findings.select(_fid(MVAR))
    window.point_actions.actions["reversed"].trigger()
    with Ledger.for_site(site_folder) as ledger:
        states = ledger.findings()["state"]
        assert states[_fid(MW)] == "corrected" and states[_fid(MVAR)] == "corrected"
        corrections = {c.tag: c for c in ledger.active_corrections()}
        assert corrections[MW].gain == -1.0 and corrections[MVAR].gain == -1.0
        assert "mark_reversed" in set(ledger.history(tag=MW)["action"])
    history = window.details.history
    assert any(history.item(r, 1).text().split("\n")[0] == "mark_reversed"
               for r in range(history.rowCount()))

    # Re-run with the corrections: the findings go, chi-square failures drop.
    window.findings.select(_fid(MW))
    review_and_wait(qtbot, window)
    second = window.run
    assert second is not first
    assert {c.tag for c in second.corrections} == {MW, MVAR}
    # Corrected in software, the review no longer sees the fault, but the finding stays
    # listed (corrected, field fix due) until the repair is marked.
    seen = second.findings[second.findings["in_this_review"]]
    assert not ({_fid(MW), _fid(MVAR)} & set(seen["finding_id"]))
    kept = second.findings.set_index("finding_id")
    assert kept.at[_fid(MW), "state"] == "corrected"
    assert "field fix is still due" in kept.at[_fid(MW), "evidence"]
    assert _fid(MW) in window.findings.leaf_ids()
    before = first.result.summary.rounds[0]["chi2_failed"]
    after = second.result.summary.rounds[0]["chi2_failed"]
    assert after < before
    assert window.figures[0].chi2_failed_all_in == before
    assert window.figures[1].chi2_failed_all_in == after
    assert f"{before} → {after}" in window.message.text()  # before/after at a glance
    compare = window.details.compare
    assert compare.rowCount() > 0 and compare.item(0, 1).text().startswith(f"{before:,}")

    # The selected point stays shown; its measured curve is now the negated raw series.
    assert window.current_tag == MW
    ev2 = second.result.evidence
    raw2 = raw_values(site_folder, MW, ev2.index)
    assert finite_equal(curves["measured"].yData, -raw2)
    assert finite_equal(curves["raw"].yData, raw2)  # as received, shown dotted
    assert np.nanmedian(curves["measured"].yData * curves["implied"].yData) > 0

    # Undo takes the correction of the selected point back out of the ledger.
    window.point_actions.actions["undo"].trigger()
    with Ledger.for_site(site_folder) as ledger:
        assert {c.tag for c in ledger.active_corrections()} == {MVAR}


def test_cancel_keeps_window_usable(qtbot, window, site_folder):
    open_and_wait(qtbot, window, site_folder)
    with qtbot.waitSignal(window.jobs.progressed, timeout=30000):
        window.start_review()
    assert window.cancel_button.isVisible()
    with qtbot.waitSignals([window.jobs.cancelled, window.jobs.idle], timeout=60000):
        window.cancel_job()
    assert window.run is None
    assert window.view.has_review is False
    assert "cancelled" in window.message.text()
    assert window.review_action.isEnabled() and not window.cancel_button.isVisible()
    with Ledger.for_site(site_folder) as ledger:
        assert ledger.reviews().empty  # nothing recorded
    # The window still works: the site can be reviewed afterwards.
    review_and_wait(qtbot, window)
    assert window.run is not None


def test_broken_site_lists_the_problem(qtbot, window, site_folder):
    buses = site_folder / "network" / "buses.csv"
    lines = buses.read_text(encoding="utf-8").splitlines()
    header = lines[0].split(",")
    cells = lines[2].split(",")  # spreadsheet row 3
    cells[header.index("kv")] = "eleven"
    lines[2] = ",".join(cells)
    buses.write_text("\n".join(lines) + "\n", encoding="utf-8")
    open_and_wait(qtbot, window, site_folder)
    assert window.site is None
    rows = window.problems_dialog.rows()
    assert ["error", "network/buses.csv", "3", "kv"] in [r[:4] for r in rows]
    assert window.problems_dialog.isVisible()
    assert "could not load" in window.message.text().lower()


def _colours(image: QImage, step: int = 3) -> int:
    seen = set()
    for y in range(0, image.height(), step):
        for x in range(0, image.width(), step):
            seen.add(image.pixel(x, y))
    return len(seen)


def test_screenshots_are_not_blank(qtbot, window, site_folder, tmp_path):
    out = Path(os.environ.get("CALIBRA_SCREENSHOTS", tmp_path / "screens"))
    out.mkdir(parents=True, exist_ok=True)
    open_and_wait(qtbot, window, site_folder)
    review_and_wait(qtbot, window)
    window.findings.select(_fid(MW))
    qtbot.wait(50)
    shots = {"main": window, "plots": window.plots, "diagram": window.diagram,
             "details": window.details}
    for name, widget in shots.items():
        path = out / f"{name}.png"
        assert widget.grab().save(str(path))
        image = QImage(str(path))
        assert image.width() > 200 and image.height() > 150
        assert _colours(image) > 12, name  # a blank or single-colour grab has one or two


def test_keyboard_moves_through_findings(qtbot, window, site_folder):
    open_and_wait(qtbot, window, site_folder)
    review_and_wait(qtbot, window)
    ids = window.findings.leaf_ids()
    window.findings.select(ids[0])
    window.activateWindow()
    window.findings.tree.setFocus()
    qtbot.keyClick(window.findings.tree, Qt.Key_F8)
    assert window.current_finding == ids[1]
    qtbot.keyClick(window.findings.tree, Qt.Key_F8, Qt.ShiftModifier)
    assert window.current_finding == ids[0]
    shortcuts = [a.shortcut().toString() for a in window.point_actions.actions.values()]
    assert len(set(shortcuts)) == len(shortcuts) and "" not in shortcuts


def test_closing_during_a_review_stops_it(qtbot, window, site_folder):
    open_and_wait(qtbot, window, site_folder)
    with qtbot.waitSignal(window.jobs.progressed, timeout=30000):
        window.start_review()
    window.close()
    assert not window.jobs.busy and window.ledger is None
    with Ledger.for_site(site_folder) as ledger:
        assert ledger.reviews().empty
