"""A network-model finding in the ledger: corrected in the model (a row of
model-corrections.csv the next load applies), kept as it is (a ``keep`` row, the finding
closed), undone (the row taken out), and refused every meter action (common practice of
maintenance work orders, no source)."""

from __future__ import annotations

import csv

import pytest

from calibra.cli import main
from calibra.diagnosis.findings import Finding
from calibra.io.model_corrections_file import MODEL_CORRECTIONS_FILE
from calibra.io.site_folder import load_site
from calibra.ledger import Ledger, LedgerError
from calibra.ledger.model_actions import keep_model, set_model, undo_last
from calibra.ledger.software_fixes import ModelNotCorrectable, plan_fixes
from calibra.simulate.writer import write_site
from tests.diagnosis.scenarios import generated_scenario
from tests.ledger.conftest import WEEK1, Clock, finding


@pytest.fixture(scope="module")
def scenario():
    return generated_scenario("case57", 4, periods=8, freq="15min", faults=False)


def _model_finding(branch: str, model: float, estimate: float) -> Finding:
    return Finding(tag=f"{branch}:x", device="", substation="S1", finding="model",
                   confidence=0.9, evidence="the meters fit another x", scope="model",
                   element=branch, unit="pu", parameter="x", model_value=model,
                   estimated_value=estimate, estimated_std=0.0002,
                   explains="A.MW, B.MW")


@pytest.fixture
def site(tmp_path, scenario):
    folder = write_site(scenario.site, tmp_path / "site")
    branch = str(scenario.site.network.branches.index[3])
    x = float(scenario.site.network.branches.at[branch, "x"])
    with Ledger(folder / "calibra-ledger.sqlite", clock=Clock()) as led:
        led.record_review([_model_finding(branch, x, 0.8 * x), finding("MC-L1-P")], *WEEK1,
                          {}, {})
    return folder, branch, x


def _rows(folder) -> list[dict]:
    with (folder / MODEL_CORRECTIONS_FILE).open(encoding="utf-8") as handle:
        return list(csv.DictReader(handle))


def test_set_model_writes_the_row_the_loader_applies(site):
    folder, branch, x = site
    fid = f"{branch}:x|model"
    with Ledger(folder / "calibra-ledger.sqlite", clock=Clock()) as led:
        action = set_model(led, folder, fid, user="ana", note="datasheet rev. C")
        assert led.findings().loc[fid, "state"] == "corrected"
    (row,) = _rows(folder)
    assert (row["element"], row["parameter"], row["decision"]) == (branch, "x", "set")
    assert float(row["value"]) == pytest.approx(0.8 * x)
    assert row["entered_by"] == "ana" and row["ledger_action"] == str(action)
    loaded = load_site(folder)
    assert loaded.network.branches.at[branch, "x"] == pytest.approx(0.8 * x)
    with Ledger(folder / "calibra-ledger.sqlite", clock=Clock()) as led:
        undo_last(led, folder, fid, user="ana")
        assert led.findings().loc[fid, "state"] == "new"
    assert _rows(folder) == []
    assert load_site(folder).network.branches.at[branch, "x"] == pytest.approx(x)


def test_keep_model_closes_the_finding_and_writes_a_keep_row(site):
    folder, branch, _ = site
    fid = f"{branch}:x|model"
    with Ledger(folder / "calibra-ledger.sqlite", clock=Clock()) as led:
        with pytest.raises(ValueError, match="needs a reason"):
            keep_model(led, folder, fid, " ")
        keep_model(led, folder, fid, "nameplate checked on site", user="ben")
        assert led.findings().loc[fid, "state"] == "dismissed"
    (row,) = _rows(folder)
    assert row["decision"] == "keep" and row["value"] == ""
    (kept,) = load_site(folder).model_corrections
    assert kept.parameter.element == branch and kept.value is None


def test_meter_actions_are_refused_on_a_model_finding(site):
    folder, branch, _ = site
    tag, fid = f"{branch}:x", f"{branch}:x|model"
    with Ledger(folder / "calibra-ledger.sqlite", clock=Clock()) as led:
        with pytest.raises(LedgerError, match="corrected in the model"):
            led.apply_scale(tag, 1.2, user="ana")
        with pytest.raises(ModelNotCorrectable, match="not in a meter's software correction"):
            plan_fixes(led.findings().loc[[fid]])
        with pytest.raises(LedgerError, match="about a meter; only a model finding"):
            set_model(led, folder, "MC-L1-P|reversed")
        assert led.active_corrections() == []
    assert not (folder / MODEL_CORRECTIONS_FILE).exists()


def test_command_line_set_model_keep_model_and_undo(site, capsys):
    folder, branch, x = site
    item = f"{branch}:x"
    assert main(["ledger", str(folder), "--user", "ana", "correct", item]) != 0
    assert "set-model" in capsys.readouterr().err + capsys.readouterr().out
    assert main(["ledger", str(folder), "set-model", item, "--value", str(0.9 * x)]) == 0
    out = capsys.readouterr().out
    assert f"taken at {0.9 * x:.6g}" in out and MODEL_CORRECTIONS_FILE in out
    assert load_site(folder).network.branches.at[branch, "x"] == pytest.approx(0.9 * x)
    assert main(["ledger", str(folder), "undo", item]) == 0
    assert _rows(folder) == []
    assert main(["ledger", str(folder), "keep-model", "MC-L1-P", "--reason", "x"]) != 0
    assert main(["ledger", str(folder), "keep-model", item, "--reason", "as-built"]) == 0
    assert _rows(folder)[0]["decision"] == "keep"
