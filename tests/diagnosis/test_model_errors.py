"""Wrong network parameters found from a week's evidence, on a generated week of IEEE 57
(pypower's case; the telemetry from the true network, the site's model with one wrong value)."""

from __future__ import annotations

import numpy as np
import pytest

from calibra.diagnosis.evidence import gather_evidence
from calibra.diagnosis.model_errors import ModelErrorSettings, find_model_errors
from calibra.estimation.meter_or_model import Verdict
from calibra.estimation.period import prepare_period
from calibra.model.parameters import ParameterKind
from calibra.simulate.model_errors import ModelError
from calibra.simulate.quantities import branch_end_power
from tests.diagnosis.scenarios import generated_scenario, scenario_case

SETTINGS = ModelErrorSettings(sample_snapshots=16, max_errors=2)


def _loaded_line(case_name: str) -> str:
    case = scenario_case(case_name)
    pf = case.solve()
    flow = np.abs(branch_end_power(case.network, (pf.vm * np.exp(1j * pf.va_rad))[None, :])[0][0]
                  .real)
    flow[case.network.branches["kind"].to_numpy() != "line"] = -1
    return str(case.network.branches.index[int(np.argmax(flow))])


def _search(model_errors):
    sim = generated_scenario("case57", 4, periods=96, freq="15min", faults=False,
                             model_errors=model_errors)
    period = prepare_period(sim.site)
    return sim, find_model_errors(gather_evidence(period), period.estimator, SETTINGS)


def test_reactance_error_is_named_with_its_value():
    """x of the most loaded line typed 30 % too large: named, the estimate within 5 % of the
    true value (the issue's goal), the comparison with meter errors says "model", and the
    points its error made look faulty are listed as explained."""
    line = _loaded_line("case57")
    sim, found = _search([ModelError(line, "x", factor=1.3)])
    true = float(sim.model_truth["true_value"].iloc[0])
    assert [(r.element, r.kind) for r in found] == [(line, ParameterKind.X)]
    r = found[0]
    assert r.estimated_value == pytest.approx(true, rel=0.05)
    assert r.verdict == Verdict.MODEL and r.confidence > 0.5
    assert r.explained
    assert f"x of branch {line}" in r.evidence and "meters fit" in r.evidence


def test_a_correct_model_gives_no_parameter():
    """The same week with the true model: no parameter is named."""
    _, found = _search([])
    assert found == []
