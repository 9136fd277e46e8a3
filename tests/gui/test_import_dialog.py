"""The import dialog driven offscreen on the generated sample exports: the preview shows the
mapping before anything is written, the import runs in the worker thread with progress, the
problems are listed, and the new site opens in the window."""

from __future__ import annotations

from pathlib import Path

from calibra.gui.qt_import import IMPORT, PREVIEW
from calibra.simulate.sample_exports import GIVEN_COLUMNS, HEADERS, MAX_AGE

SCREENSHOTS = Path(__file__).resolve().parents[2] / "screenshots"


def fill(dialog, out: Path, folder: Path) -> None:
    dialog.set_inputs(sorted((out / "history").iterdir()), out / "tarrowmere-points.xlsx",
                      [out / "tarrowmere.m"], folder)
    dialog.sheet.setText("Telemetry")
    dialog.name.setText("Tarrowmere regional grid")
    dialog.timezone.setCurrentText("Europe/Oslo")
    dialog.frequency.setCurrentText("50")
    dialog.max_age.setText(MAX_AGE)
    for column in GIVEN_COLUMNS:
        dialog.add_column(column, HEADERS[column])


def test_preview_import_and_open(qtbot, window, sample_exports, tmp_path):
    out, record = sample_exports
    dialog = window.show_import_dialog()
    qtbot.addWidget(dialog)
    folder = tmp_path / "tarrowmere"
    fill(dialog, out, folder)
    assert not dialog.import_button.isEnabled()  # no import before a preview
    with qtbot.waitSignals([dialog.jobs.finished, dialog.jobs.idle], timeout=120000):
        dialog.preview_button.click()
    assert dialog.plan is not None and dialog.jobs.name == PREVIEW
    assert not folder.exists()  # the preview writes nothing
    rows = {dialog.mapping.item(r, 0).text(): [dialog.mapping.item(r, c).text()
                                               for c in range(5)]
            for r in range(dialog.mapping.rowCount())}
    assert rows["tag"][1:4] == ["SCADA point", "A", "given"]
    assert rows["element"][1:4] == ["Equipment", "C", "recognised name"]
    assert rows["tag"][4].startswith("VSM.220.EBB1.MW | ")
    assert "none" in dialog.unplaced.text()
    overview = dialog.overview.toPlainText()
    assert "long export: 7" in overview and "40 buses, 50 branches" in overview
    assert "export tags not in the point list: 0" in overview
    assert dialog.import_button.isEnabled()
    SCREENSHOTS.mkdir(exist_ok=True)
    dialog.grab().save(str(SCREENSHOTS / "import-preview.png"))

    with qtbot.waitSignals([dialog.jobs.finished, dialog.jobs.idle], timeout=120000):
        dialog.import_button.click()
    assert dialog.jobs.name == IMPORT
    outcome = dialog.outcome
    assert outcome.usable and (folder / "site.toml").is_file()
    shown = dialog.problems.rowCount()
    assert shown == len(outcome.problems) > 0
    files = {dialog.problems.item(r, 1).text() for r in range(shown)}
    assert "points.xlsx [Telemetry]" in files
    assert any(f.startswith("snapshots/tarrowmere-2027-03-0") for f in files)
    assert dialog.open_button.isEnabled()
    dialog.grab().save(str(SCREENSHOTS / "import-problems.png"))

    with qtbot.waitSignal(window.jobs.idle, timeout=60000):
        dialog.open_button.click()
    assert window.site is not None and window.site.path == folder
    assert window.site.name == "Tarrowmere regional grid"


def test_inputs_missing_and_cancel(qtbot, window, sample_exports, tmp_path):
    out, _ = sample_exports
    dialog = window.show_import_dialog()
    qtbot.addWidget(dialog)
    dialog.preview_button.click()
    assert "choose the historian export(s)" in dialog.status.text()
    fill(dialog, out, tmp_path / "site")
    dialog.timezone.setCurrentText("")
    dialog.preview_button.click()
    assert "time zone" in dialog.status.text() and not dialog.jobs.busy
    dialog.timezone.setCurrentText("Europe/Oslo")
    dialog.max_age.setText("soon")
    dialog.preview_button.click()
    assert "Maximum age: 'soon' is not a duration" in dialog.status.text()
    dialog.max_age.setText(MAX_AGE)
    with qtbot.waitSignals([dialog.jobs.cancelled, dialog.jobs.idle], timeout=120000):
        dialog.preview_button.click()
        dialog.cancel_button.click()
    assert "cancelled; nothing was written" in dialog.status.text()
    assert not (tmp_path / "site").exists()
    # a required column not found: the refusal is listed with the file and sheet
    dialog.columns.removeRow(0)
    with qtbot.waitSignals([dialog.jobs.failed, dialog.jobs.idle], timeout=120000):
        dialog.preview_button.click()
    assert dialog.problems.rowCount() == 1
    assert dialog.problems.item(0, 1).text().endswith("tarrowmere-points.xlsx [Telemetry]")
    assert "no header holds calibra's column 'tag'" in dialog.problems.item(0, 4).text()
