"""Point actions with their questions answered by a stand-in, the findings filters, work
orders, review settings and the About text, on the real main window."""

from __future__ import annotations

import csv
import json

import pandas as pd
import pytest
from PySide6.QtCore import Qt, QTimer

from calibra.app_settings import SETTINGS_FILE, SiteSettings
from calibra.gui.qt_dialogs import ABOUT_HTML
from calibra.ledger import Ledger
from calibra.reports import SAFETY_CAUTIONS
from tests.gui.conftest import REVERSED_TAGS, open_and_wait, review_and_wait

MW, MVAR = REVERSED_TAGS


class Answers:
    """Stands in for the dialogs: returns the prepared answers and records the questions."""

    def __init__(self, number=None, text=None, when=None):
        self._number, self._text, self._when = number, text, when
        self.asked: list[tuple[str, object]] = []

    def number(self, title, label, value):
        self.asked.append(("number", value))
        return self._number

    def text(self, title, label):
        self.asked.append(("text", label))
        return self._text

    def when(self, title, label, default, timezone):
        self.asked.append(("when", timezone))
        return self._when


@pytest.fixture
def reviewed_window(qtbot, window, site_folder):
    open_and_wait(qtbot, window, site_folder)
    review_and_wait(qtbot, window)
    return window


def _actions(ledger: Ledger, tag: str) -> list[str]:
    history = ledger.history(tag=tag)
    return list(history.loc[history["undone_by"].isna(), "action"])


def test_each_action_goes_to_the_ledger(reviewed_window, site_folder):
    w = reviewed_window
    act = w.point_actions.actions
    assert w.findings.select(f"{MVAR}|reversed")
    w.prompts = Answers(number=-1.0)
    act["scale"].trigger()
    assert w.prompts.asked[0][0] == "number"
    assert abs(w.prompts.asked[0][1] + 1) < 0.02  # offered the fitted factor
    w.prompts = Answers(text="checked the CT marks on site")
    act["note"].trigger()
    act["confirm"].trigger()  # corrected findings cannot be confirmed: refused, not raised
    assert "cannot confirm" in w.message.text()
    at = pd.Timestamp("2027-03-01 09:30", tz="UTC")
    w.prompts = Answers(when=at)
    act["repaired"].trigger()
    with Ledger.for_site(site_folder) as ledger:
        assert _actions(ledger, MVAR)[-3:] == ["apply_scale", "note", "mark_repaired"]
        assert ledger.findings()["state"][f"{MVAR}|reversed"] == "repaired"
        corr = [c for c in ledger.active_corrections((at - pd.Timedelta(hours=9), at))
                if c.tag == MVAR]
        assert corr and corr[0].valid_until == at  # the correction ends at the repair
    assert w.details.history.rowCount() >= 4

    # Dismiss needs a reason; cancelling the question writes nothing.
    assert w.findings.select(f"{MW}|reversed")
    w.prompts = Answers(text=None)
    act["dismiss"].trigger()
    w.prompts = Answers(text="load sign convention agreed with operations")
    act["dismiss"].trigger()
    w.prompts = Answers(number=2.5)
    act["offset"].trigger()
    with Ledger.for_site(site_folder) as ledger:
        assert _actions(ledger, MW)[-2:] == ["dismiss", "apply_offset"]
        assert ledger.findings()["state"][f"{MW}|reversed"] == "dismissed"
        offset = [c for c in ledger.active_corrections() if c.tag == MW][0]
        assert offset.bias == -2.5  # measured = true + 2.5, so true = measured − 2.5
    act["undo"].trigger()
    with Ledger.for_site(site_folder) as ledger:
        assert not [c for c in ledger.active_corrections() if c.tag == MW]


def test_filters_and_new_substation_focus(reviewed_window):
    w = reviewed_window
    panel = w.findings
    everything = set(panel.leaf_ids())
    panel.kind.setCurrentIndex(panel.kind.findData("reversed"))
    assert set(panel.leaf_ids()) == {f"{MW}|reversed", f"{MVAR}|reversed"}
    panel.kind.setCurrentIndex(0)
    panel.search.setText("mvar")
    assert all("MVAR" in fid for fid in panel.leaf_ids())
    panel.search.clear()
    assert set(panel.leaf_ids()) == everything
    # The point list marks NRC as being commissioned (its notes say so).
    assert w.view.focus == ["NRC"] and panel.focus.isEnabled()
    panel.focus.setChecked(True)
    assert all(w.view.row(fid)["substation"] == "NRC" for fid in panel.leaf_ids())
    panel.focus.setChecked(False)
    panel.confidence.setValue(1.0)
    assert all(w.view.row(fid)["confidence"] >= 1.0 for fid in panel.leaf_ids())


def test_sorting_by_confidence_changes_navigation_order(reviewed_window):
    panel = reviewed_window.findings
    panel.tree.sortByColumn(2, Qt.DescendingOrder)
    ids = panel.leaf_ids()
    panel.select(ids[0])
    assert panel.step(1) == ids[1]


def test_work_orders_preview_pdf_and_csv(reviewed_window, tmp_path):
    w = reviewed_window
    dialog = w.work_orders_dialog()
    assert dialog.chosen() and set(dialog.chosen()) == set(dialog.pages)
    html = dialog.preview.toHtml()
    for caution in SAFETY_CAUTIONS:  # every caution of the reports module is shown
        assert caution.text.split(":")[0][:40] in html.replace("\n", " ")
    printed = dialog.document().toPlainText()  # what the printer gets: every page
    for sub in dialog.chosen():
        assert f"Field checklist: {sub}" in printed
    pdf = dialog.save_pdf(tmp_path / "orders.pdf")
    assert pdf is not None and pdf.read_bytes()[:5] == b"%PDF-"
    first = dialog.substations.item(0)
    first.setCheckState(Qt.Unchecked)
    out = dialog.export_csv(tmp_path / "orders.csv")
    with open(out, newline="", encoding="utf-8") as f:
        rows = list(csv.DictReader(f))
    assert rows and first.data(Qt.UserRole) not in {r["substation"] for r in rows}
    for r in range(dialog.substations.count()):
        dialog.substations.item(r).setCheckState(Qt.Unchecked)
    assert dialog.export_csv(tmp_path / "none.csv") is None
    assert "Tick at least one" in dialog.status.text()


def test_settings_saved_with_the_site_and_used(qtbot, reviewed_window, site_folder):
    w = reviewed_window
    w.save_settings(SiteSettings(normalized_threshold=3.5, confidence=0.995,
                                 min_snapshots=100_000))
    data = json.loads((site_folder / SETTINGS_FILE).read_text(encoding="utf-8"))
    assert data["review"]["min_snapshots"] == 100_000
    review_and_wait(qtbot, w)
    # Nothing has 100,000 snapshots in twelve hours: no point can be judged reversed now.
    assert "reversed" not in set(w.run.findings["finding"])
    with Ledger.for_site(site_folder) as ledger:
        assert ledger.reviews().iloc[-1]["settings"]["classify"]["min_snapshots"] == 100_000


def test_bad_settings_file_warns_and_uses_defaults(qtbot, window, site_folder):
    (site_folder / SETTINGS_FILE).write_text('{"review": {"confidence": 7}}', encoding="utf-8")
    open_and_wait(qtbot, window, site_folder)
    assert window.settings == SiteSettings()
    assert SETTINGS_FILE in window.message.text() and "confidence" in window.message.text()
    assert any(d.isVisible() and SETTINGS_FILE in d.text() for d in window.dialogs)


def test_about_says_findings_are_advisory():
    text = ABOUT_HTML.lower()
    assert "advisory" in text and "never open the secondary circuit" in text


def _answer_modal(qtbot, fill) -> None:
    """Fill and accept the next modal dialog once it is shown."""
    from PySide6.QtWidgets import QApplication

    def go():
        dialog = QApplication.activeModalWidget()
        if dialog is None:
            QTimer.singleShot(20, go)
            return
        fill(dialog)
        dialog.accept()

    QTimer.singleShot(20, go)


def test_real_questions_return_what_was_entered(qtbot, window):
    from PySide6.QtWidgets import QDateTimeEdit

    prompts = window.prompts
    _answer_modal(qtbot, lambda d: d.setDoubleValue(1.5))
    assert prompts.number("Scale", "factor", 1.0) == 1.5
    _answer_modal(qtbot, lambda d: d.setTextValue("  wiring checked  "))
    assert prompts.text("Note", "text") == "wiring checked"
    # A repair time is entered in the site's timezone and comes back in UTC (IANA rules:
    # Europe/Oslo is UTC+1 in March before the change to summer time).
    default = pd.Timestamp("2027-03-01 08:00", tz="UTC")

    def later(dialog):
        edit = dialog.findChild(QDateTimeEdit)
        edit.setDateTime(edit.dateTime().addSecs(3600))

    _answer_modal(qtbot, later)
    got = prompts.when("Repaired", "when", default, "Europe/Oslo")
    assert got == pd.Timestamp("2027-03-01 09:00", tz="UTC")


def test_moving_through_the_list_is_quick(reviewed_window):
    import time

    from PySide6.QtWidgets import QApplication

    w = reviewed_window
    times = []
    for fid in w.findings.leaf_ids() * 2:
        start = time.perf_counter()
        w.findings.select(fid)
        QApplication.processEvents()
        times.append(time.perf_counter() - start)
    # The issue asks for "well under a second" per point (a loaded 2-core machine included).
    assert sorted(times)[len(times) // 2] < 0.5
