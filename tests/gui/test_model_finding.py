"""A network-model finding in the desktop application: listed, shown with its values, kept off
the crews' sheets, and corrected in the model through Point ▸ Correct the model… (the value
written to model-corrections.csv, the next review clean).

Ground truth: the invented sample grid simulated on its true network, its site folder holding
the reactance of one line 30 % too large (as a model typed from a wrong datasheet would)."""

from __future__ import annotations

import numpy as np
import pytest

from calibra.io.model_corrections_file import MODEL_CORRECTIONS_FILE
from calibra.simulate.model_errors import ModelError
from tests.gui.conftest import ORIGINAL_PERIODS, open_and_wait, review_and_wait


def _loaded_line(case) -> str:
    from calibra.simulate.quantities import branch_end_power

    pf = case.solve()
    flow = np.abs(branch_end_power(case.network, (pf.vm * np.exp(1j * pf.va_rad))[None, :])
                  [0][0].real)
    flow[case.network.branches["kind"].to_numpy() != "line"] = -1
    return str(case.network.branches.index[int(np.argmax(flow))])


@pytest.fixture
def wrong_x_site(tmp_path):
    from calibra.simulate import sample_site as ss
    from calibra.simulate.telemetry import simulate_site
    from calibra.simulate.writer import write_site

    case = ss.tarrowmere_case()
    line = _loaded_line(case)
    points = ss.sample_points(case, 7)
    result = simulate_site(case, points, start=ss.START_LOCAL, periods=ORIGINAL_PERIODS,
                           timezone=ss.TIMEZONE, seed=7, faults=[], outages=None,
                           name="Small test grid", mix=ss._mix(case.network),
                           wind_mw=ss.WIND_MW, model_errors=[ModelError(line, "x", factor=1.3)])
    folder = write_site(result.site, tmp_path / "site", model_truth=result.model_truth)
    return folder, line, float(result.model_truth["true_value"].iloc[0])


def test_model_finding_shown_and_corrected_in_the_model(qtbot, window, wrong_x_site):
    folder, line, true = wrong_x_site
    open_and_wait(qtbot, window, folder)
    review_and_wait(qtbot, window)
    fid = f"{line}:x|model"
    table = window.run.findings.set_index("finding_id")
    assert fid in table.index
    # reference: the x of the simulator's true network (the telemetry's)
    assert float(table.at[fid, "estimated_value"]) == pytest.approx(true, rel=0.05)
    assert window.findings.select(fid)
    details = window.details.point.toPlainText()
    assert f"Network model: {line}:x" in details and "Meters it explains" in details
    assert "finding about the network model" in window.plots.title.text()
    actions = window.point_actions
    assert not actions.apply_scale(1.2), "a meter's correction is refused"
    assert actions.set_model(float(table.at[fid, "estimated_value"]))
    assert window.state.ledger.findings().loc[fid, "state"] == "corrected"
    assert f"{line},x,set," in (folder / MODEL_CORRECTIONS_FILE).read_text()
    open_and_wait(qtbot, window, folder)
    review_and_wait(qtbot, window)
    seen = window.run.findings
    assert not (seen["in_this_review"] & (seen["finding"] == "model")).any()
