"""The review's model pass, end to end on generated weeks of IEEE 57 (pypower's case57; the
telemetry from the true network, the site's model with one reactance typed 30 % too large)."""

from __future__ import annotations

import json

import pandas as pd
import pytest

from calibra.diagnosis.findings import MODEL_KINDS, FindingKind, findings_table
from calibra.diagnosis.review import review_site
from calibra.io.model_corrections_file import MODEL_CORRECTIONS_FILE
from calibra.io.site_folder import load_site
from calibra.model.site import SiteLoadError
from calibra.review_run import ReviewRun, run_review, write_outputs
from calibra.simulate.faults import FaultSpec
from calibra.simulate.model_errors import ModelError
from calibra.simulate.writer import write_site
from tests.diagnosis.scenarios import generated_scenario
from tests.diagnosis.test_model_errors import _loaded_line

CASE, SEED, PERIODS, FREQ = "case57", 4, 288, "15min"
#: Findings about points that no seeded fault explains on this network's clean week either
#: (too weakly checked to judge): not blame, and not caused by the parameter.
NOT_BLAME = (FindingKind.UNVERIFIABLE, *MODEL_KINDS)


def _scale_tag(sim, line: str) -> str:
    pts = sim.site.points
    far = pts[(pts["quantity"] == "p_flow") & (pts["element"] != line)]
    return str(far.index[len(far) // 2])


@pytest.fixture(scope="module")
def wrong_x():
    """The week with x of the most loaded line 30 % too large in the model and one real scale
    fault (CT ratio 1.2) on a flow meter elsewhere; the review of it."""
    line = _loaded_line(CASE)
    clean = generated_scenario(CASE, SEED, periods=PERIODS, freq=FREQ, faults=False)
    tag = _scale_tag(clean, line)
    sim = generated_scenario(CASE, SEED, periods=PERIODS, freq=FREQ,
                             faults=[FaultSpec("scale", (tag,), factor=1.2)],
                             model_errors=[ModelError(line, "x", factor=1.3)])
    return sim, line, tag, review_site(sim.site)


def test_wrong_reactance_is_named_within_five_percent(wrong_x):
    """One model finding, on the line's x, its estimate within 5 % of the true value (the
    issue's goal)."""
    sim, line, _, result = wrong_x
    model = [f for f in result.findings if f.finding == FindingKind.MODEL]
    assert [(f.element, f.parameter) for f in model] == [(line, "x")]
    f = model[0]
    # reference: the x pypower's case57 holds for the branch (the telemetry's true network)
    true = float(sim.model_truth["true_value"].iloc[0])
    assert f.estimated_value == pytest.approx(true, rel=0.05)
    assert f.model_value == pytest.approx(1.3 * true)
    assert f.estimated_std > 0 and f.tag == f"{line}:x"
    assert "judged again with the estimated value" in f.evidence


def test_no_meter_blamed_and_the_real_fault_still_found(wrong_x):
    """The only meter blamed is the seeded scale fault (its factor recovered); the meters the
    parameter made disagree are not."""
    _, _, tag, result = wrong_x
    blamed = {f.tag: f for f in result.findings if f.finding not in NOT_BLAME}
    assert set(blamed) == {tag}
    assert blamed[tag].finding == FindingKind.SCALE
    # reference: the seeded fault, measured = 1.2 × true (the simulator's truth)
    assert blamed[tag].factor == pytest.approx(1.2, abs=0.02)


def test_a_clean_week_gives_no_model_finding():
    """The true model: no model finding and the search is not even run."""
    clean = generated_scenario(CASE, SEED, periods=PERIODS, freq=FREQ, faults=False)
    result = review_site(clean.site)
    assert not [f for f in result.findings if f.finding == FindingKind.MODEL]
    assert result.model_errors == [] and result.summary.model_errors == []


def test_the_correction_file_makes_the_next_review_clean(wrong_x, tmp_path):
    """The site folder written with the wrong model and the estimated x in
    model-corrections.csv: the loader applies it (the network file keeps the wrong value), the
    review finds no model error and blames only the seeded meter."""
    sim, line, tag, result = wrong_x
    f = next(f for f in result.findings if f.finding == FindingKind.MODEL)
    folder = write_site(sim.site, tmp_path / "site")
    (folder / MODEL_CORRECTIONS_FILE).write_text(
        "element,parameter,decision,value,reason\n"
        f"{line},x,set,{f.estimated_value!r},line datasheet re-read\n", encoding="utf-8")
    site = load_site(folder)
    assert site.network.branches.at[line, "x"] == pytest.approx(f.estimated_value)
    assert [c.parameter.element for c in site.model_corrections] == [line]
    run = run_review(site)
    again = run.result
    assert not [g for g in again.findings if g.finding == FindingKind.MODEL]
    assert {g.tag for g in again.findings if g.finding not in NOT_BLAME} == {tag}
    files = write_outputs(run, site, tmp_path / "out")
    applied = json.loads(files["summary_json"].read_text())["model_corrections_applied"]
    assert [(a["element"], a["parameter"], a["decision"], a["row"]) for a in applied] == \
        [(line, "x", "set", 2)]
    assert (f"network model as the owner decided (model-corrections.csv, row 2): x of branch "
            f"{line} set to") in files["summary"].read_text()
    assert "model_work_orders_csv" not in files


def test_outputs_put_the_model_finding_on_its_own_sheet(wrong_x, tmp_path):
    """findings.csv carries the model columns; model_work_orders.csv lists the parameter; the
    crews' work orders list the meter fault, not the parameter."""
    sim, line, tag, result = wrong_x
    table = findings_table(result.findings)
    table["state"] = "new"
    run = ReviewRun(result, table, None, [], 1.0)
    files = write_outputs(run, sim.site, tmp_path / "out")
    found = pd.read_csv(files["findings"], encoding="utf-8-sig")
    row = found[found["finding"] == "model"].iloc[0]
    assert (row["tag"], row["element"], row["parameter"]) == (f"{line}:x", line, "x")
    assert row["estimated_std"] > 0 and isinstance(row["explains"], str)
    crews = pd.read_csv(files["work_orders_csv"], encoding="utf-8-sig")
    assert tag in set(crews["tags"].dropna())
    assert not {t for t in crews["tags"].dropna() if ":" in t or line in t}
    owner = pd.read_csv(files["model_work_orders_csv"], encoding="utf-8-sig")
    assert set(owner["element"].dropna()) == {line}
    assert "network-model parameter" in files["summary"].read_text()


def test_keep_decision_leaves_the_meters_blamed(wrong_x, tmp_path):
    """'keep' (the model's value checked and right): the parameter is not offered, the meters
    it would explain are the suspects."""
    sim, line, tag, _ = wrong_x
    folder = write_site(sim.site, tmp_path / "site")
    (folder / MODEL_CORRECTIONS_FILE).write_text(
        f"element,parameter,decision\n{line},x,keep\n", encoding="utf-8")
    result = review_site(load_site(folder))
    assert not [g for g in result.findings if g.finding == FindingKind.MODEL
                and g.element == line and g.parameter == "x"]
    blamed = [g for g in result.findings if g.finding not in NOT_BLAME and g.tag != tag]
    assert blamed
    # the meters beside the kept parameter say the model was ruled out (common practice)
    assert any(f"keeps it as it is ({MODEL_CORRECTIONS_FILE}, row 2): not the model"
               in g.evidence for g in blamed)


@pytest.mark.parametrize(("row", "column", "words"), [
    ("NO-SUCH,x,set,0.05", "element", "branch 'NO-SUCH' is not in the network"),
    ("{line},y,set,0.05", "parameter", "'y' is not a parameter"),
    ("{line},x,change,0.05", "decision", "'change' is not a decision"),
    ("{line},x,set,", "value", "'set' needs the value"),
    ("{line},x,set,abc", "value", "'abc' is not a finite number"),
    ("{line},x,set,0", "value", "a reactance of 0"),
    ("{line},tap,set,1.02", "parameter", "tap applies to a transformer"),
    ("{trafo},tap,set,-1", "value", "a tap ratio must be positive"),
])
def test_bad_correction_rows_are_errors_naming_file_row_and_column(tmp_path, row, column,
                                                                      words):
    """Every bad cell is an error at its file, row and column (common practice, no source)."""
    sim = generated_scenario(CASE, SEED, periods=8, freq=FREQ, faults=False)
    br = sim.site.network.branches
    line = str(br.index[br["kind"] == "line"][0])
    trafo = str(br.index[br["kind"] == "transformer"][0])
    folder = write_site(sim.site, tmp_path / "site")
    (folder / MODEL_CORRECTIONS_FILE).write_text(
        "element,parameter,decision,value\n" + f"{line},r,keep,\n"
        + row.format(line=line, trafo=trafo) + "\n", encoding="utf-8")
    with pytest.raises(SiteLoadError) as caught:
        load_site(folder)
    problems = [p for p in caught.value.problems if p.file == MODEL_CORRECTIONS_FILE]
    assert [(p.row, p.column) for p in problems] == [(3, column)]
    assert words in problems[0].message


def test_a_parameter_on_two_rows_is_an_error(tmp_path):
    sim = generated_scenario(CASE, SEED, periods=8, freq=FREQ, faults=False)
    line = str(sim.site.network.branches.index[0])
    folder = write_site(sim.site, tmp_path / "site")
    (folder / MODEL_CORRECTIONS_FILE).write_text(
        f"element,parameter,decision,value\n{line},x,set,0.05\n{line},x,keep,\n",
        encoding="utf-8")
    with pytest.raises(SiteLoadError, match="row 3, column 'parameter'.*already corrected "
                                            "on row 2"):
        load_site(folder)


def test_the_simulator_never_seeds_a_model_kind_as_a_meter_fault():
    """A model finding is about the network, not a meter: the simulator's meter fault kinds
    leave it out, as they leave out the RTU clock (common practice, no source)."""
    from calibra.simulate.faults import FAULT_KINDS

    assert not set(MODEL_KINDS) & set(FAULT_KINDS)
    assert FindingKind.TIME_OFFSET not in FAULT_KINDS


def test_not_separable_keeps_the_meter_finding_and_says_both():
    """A parameter that meter errors explain as well (the comparison's "not separable", e.g. a
    branch metered at one end only) is not applied: the meter keeps its finding, which names
    the parameter, and the model finding names the meter and the one that would separate them
    (common practice, no source)."""
    from calibra.diagnosis.findings import Finding
    from calibra.diagnosis.model_errors import ModelErrorResult
    from calibra.diagnosis.model_review import applied, model_findings, note_alternatives
    from calibra.estimation.meter_or_model import Verdict
    from calibra.model.parameters import NetworkParameter

    sim = generated_scenario(CASE, SEED, periods=8, freq=FREQ, faults=False)
    trafo = str(sim.site.network.branches.index[sim.site.network.branches["kind"]
                                                == "transformer"][0])
    result = ModelErrorResult(
        NetworkParameter(trafo, "tap"), 1.0, 1.025, 0.002, 0.4, Verdict.NOT_SEPARABLE, 12.0,
        900.0, 40.0, 32, ["T.MW"], ["T.MW"], "a meter of the active-power flow at the far end",
        "the tap of branch …")
    meter = Finding(tag="T.MW", device="T", substation="S", finding=FindingKind.SCALE,
                    confidence=0.99, evidence="measured ≈ 1.025 × implied", factor=1.025)
    assert applied([result]) == []
    findings = [meter]
    note_alternatives(findings, [result])
    (model,) = model_findings(sim.site, [result])
    assert f"or the tap of branch {trafo} is wrong" in meter.evidence
    assert f"see the model finding {trafo}:tap" in meter.evidence
    assert model.alternative_meters == "T.MW" and "cannot tell" in model.evidence
    assert "add a meter of the active-power flow at the far end" in model.action
    bus = str(sim.site.network.branches.at[trafo, "from_bus"])
    assert model.substation == str(sim.site.network.buses.at[bus, "substation"])
