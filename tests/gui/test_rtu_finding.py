"""A finding about an RTU, not a point (an RTU clock running late), in the desktop
application: listed, selected without an error, its points shown in the details.

The ground truth is the simulator's clock error: every analog point of RTU-MRG of the small
invented grid stamped 5 minutes late (the value at t is the true value at t − 5 min)."""

from __future__ import annotations

import shutil

import pytest

from calibra.simulate.telemetry import TelemetryOptions
from tests.gui.conftest import _small_site, open_and_wait, review_and_wait

RTU = "RTU-MRG"


@pytest.fixture(scope="module")
def lagging_template(tmp_path_factory):
    folder = tmp_path_factory.mktemp("lagging") / "site"
    _small_site(folder, options=TelemetryOptions(rtu_lag_minutes=5.0, rtu_lag=RTU))
    return folder


@pytest.fixture
def lagging_site(lagging_template, tmp_path):
    """A fresh copy (its own ledger and settings)."""
    folder = tmp_path / "site"
    shutil.copytree(lagging_template, folder)
    return folder


def test_rtu_clock_finding_is_listed_and_shown(qtbot, window, lagging_site):
    open_and_wait(qtbot, window, lagging_site)
    review_and_wait(qtbot, window)
    fid = f"{RTU}|time_offset"
    assert fid in set(window.run.findings["finding_id"])
    assert fid in set(window.findings.leaf_ids())
    assert window.findings.select(fid)
    assert window.current_tag == RTU
    details = window.details.point.toPlainText()
    assert f"RTU {RTU}" in details and "time_offset" in details
    # Its points from the point list are listed (the simulator's tags of the RTU).
    assert "MRG.110.BRN1.MW" in details and "MRG.33.LOAD1.MVAR" in details
    offset = float(window.run.findings.set_index("finding_id").at[fid, "offset"])
    assert abs(offset - 300.0) < 60.0  # within one one-minute interval of the seeded lag
    # No week of its own: the plot says so instead of drawing a point's curves.
    assert "finding about the RTU" in window.plots.title.text()
    # Decisions: an offset correction in software is refused with the reason, confirming works.
    actions = window.point_actions
    assert not actions.apply_offset(300.0)
    assert actions.confirm()
    state = window.state.ledger.findings().loc[fid, "state"]
    assert state == "confirmed"


def test_work_orders_dialog_has_the_rtu_sheet_apart(qtbot, window, lagging_site, tmp_path):
    """Review ▸ Work orders…: the crews' substation checklists and, apart, the RTU/SCADA sheet
    with the safety cautions; the PDF holds both."""
    from calibra.gui.qt_work_orders import WorkOrdersDialog
    from calibra.reports.rtu_sheet import RTU_SHEET_TITLE

    open_and_wait(qtbot, window, lagging_site)
    review_and_wait(qtbot, window)
    dialog = WorkOrdersDialog(window.site, window.run.findings, None, window)
    qtbot.addWidget(dialog)
    assert RTU_SHEET_TITLE in dialog.sheets
    assert all(RTU not in s.tags for name, s in dialog.sheets.items() if name != RTU_SHEET_TITLE)
    page = dialog.pages[RTU_SHEET_TITLE]
    assert "lockout/tagout" in page and "MRG.110.BRN1.MW" in page
    assert dialog.save_pdf(tmp_path / "wo.pdf").stat().st_size > 0


def test_tap_finding_details_name_the_transformer(lagging_site):
    """A transformer without tap telemetry whose tap moves (``tap_unreported``: tag = the
    branch, not a point) is shown as the transformer's tap changer, not as an RTU clock."""
    import pandas as pd

    from calibra.gui.qt_details import rtu_html
    from calibra.io import load_site

    site = load_site(lagging_site)
    finding = pd.Series({"finding": "tap_unreported", "confidence": 0.99, "factor": 1.08,
                         "substation": "MRG", "evidence": "steps back and forth 9 times",
                         "state": "new"})
    html = rtu_html(site, "MRG-T1", finding)
    assert "Transformer MRG-T1 tap changer" in html and "1.08" in html
    assert "Clock offset" not in html and "steps back and forth" in html
