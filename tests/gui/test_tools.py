"""Review period, exports, the user guide and device-level actions from the window."""

from __future__ import annotations

import xml.etree.ElementTree as ET

import pandas as pd
from PySide6.QtGui import QImage
from PySide6.QtWidgets import QTextBrowser

from calibra.ledger import Ledger
from tests.gui.conftest import REVERSED_TAGS, open_and_wait, review_and_wait


def test_period_choice_reviews_that_period(qtbot, window, site_folder):
    open_and_wait(qtbot, window, site_folder)
    index = window.site.snapshots.index
    dialog = window.tools.period_dialog()
    assert dialog.values() == (index[0], index[-1])  # the whole period by default
    start, end = index[120], index[479]
    dialog.edits[0].setDateTime(dialog.edits[0].dateTime().addSecs(120 * 60))
    dialog.edits[1].setDateTime(dialog.edits[1].dateTime().addSecs(-240 * 60))
    assert dialog.values() == (start, end)
    with qtbot.waitSignals([window.jobs.finished, window.jobs.idle], timeout=90000):
        window.tools.set_period(*dialog.values())
    result = window.run.result
    assert (result.period_start, result.period_end) == (start, end)
    assert result.summary.snapshots == 360
    review_and_wait(qtbot, window)  # F5 keeps the chosen period
    assert window.run.result.summary.snapshots == 360


def test_exports_write_valid_files(qtbot, window, site_folder, tmp_path):
    open_and_wait(qtbot, window, site_folder)
    review_and_wait(qtbot, window)
    assert window.findings.select(f"{REVERSED_TAGS[0]}|reversed")
    png = window.tools.export_plot(tmp_path / "plot.png")
    image = QImage(str(png))
    assert not image.isNull() and image.width() == window.plots.width()
    assert len({image.pixel(x, y) for x in range(0, image.width(), 7)
                for y in range(0, image.height(), 7)}) > 20  # a drawing, not a blank
    svg = window.tools.export_plot(tmp_path / "plot.svg")
    root = ET.parse(svg).getroot()
    assert root.tag.endswith("svg") and len(list(root.iter())) > 50
    window.findings.search.setText("MRG1")
    csv = window.tools.export_findings(tmp_path / "findings.csv")
    table = pd.read_csv(csv)
    assert set(table["finding_id"]) == set(window.findings.leaf_ids())
    assert {f"{t}|reversed" for t in REVERSED_TAGS} <= set(table["finding_id"])


def test_guide_opens_from_help_with_safety_cautions(qtbot, window):
    window.tools.guide_action.trigger()
    dialog = window.tools.dialog
    assert dialog is not None and dialog.isVisible()
    text = dialog.findChild(QTextBrowser, "guide").toPlainText()
    for words in ("Findings are advisory", "lockout/tagout", "qualified personnel",
                  "Never open the secondary", "Local codes", "no estimate"):
        assert words in text
    assert any(a is window.tools.guide_action for a in window.menuBar().actions()[-1]
               .menu().actions())


def test_device_correction_acts_on_every_open_finding(qtbot, window, site_folder):
    open_and_wait(qtbot, window, site_folder)
    review_and_wait(qtbot, window)
    assert window.findings.select(f"{REVERSED_TAGS[0]}|reversed")
    done = window.device_actions.correct_device()
    assert len(done) == 2
    with Ledger.for_site(site_folder) as ledger:
        states = ledger.findings()["state"]
        corrections = {c.tag: c.gain for c in ledger.active_corrections()}
    for tag in REVERSED_TAGS:
        assert states[f"{tag}|reversed"] == "corrected"
        assert corrections[tag] == -1.0
    assert window.device_actions.correct_device() == []  # nothing left undecided
