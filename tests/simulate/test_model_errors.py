"""Simulated sites whose network model carries wrong parameters while the telemetry comes from
the true network (IEEE 57 from pypower)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from calibra.io.site_folder import load_site
from calibra.simulate.model_errors import ModelError, model_with_errors
from calibra.simulate.writer import write_site
from tests.diagnosis.scenarios import generated_scenario, scenario_case


def test_model_errors_change_the_model_not_the_telemetry(tmp_path):
    """The same seed with and without a wrong reactance: identical snapshots (the telemetry is
    the true network's), the site's network differs in exactly that value, the truth records
    it, and a written site folder loads back with the wrong value and the truth beside it."""
    clean = generated_scenario("case57", 4, periods=24, freq="30min")
    branch = str(clean.site.network.branches.index[5])
    true_x = float(clean.site.network.branches.at[branch, "x"])
    errors = [ModelError(branch, "x", factor=1.3, detail="datasheet of another conductor")]
    sim = generated_scenario("case57", 4, periods=24, freq="30min", model_errors=errors)
    pd.testing.assert_frame_equal(sim.site.snapshots, clean.site.snapshots)
    got = sim.site.network.branches
    want = clean.site.network.branches.copy()
    want.at[branch, "x"] = 1.3 * true_x
    pd.testing.assert_frame_equal(got, want)
    assert sim.model_truth.to_dict("records") == [{
        "element": branch, "parameter": "x", "true_value": true_x, "model_value": 1.3 * true_x,
        "detail": "datasheet of another conductor"}]
    assert clean.model_truth.empty
    folder = write_site(sim.site, tmp_path / "site", sim.truth, sim.model_truth)
    loaded = load_site(folder)
    assert loaded.network.branches.at[branch, "x"] == pytest.approx(1.3 * true_x, rel=1e-12)
    truth = pd.read_csv(folder / "truth" / "model_errors.csv")
    assert truth["true_value"].iloc[0] == pytest.approx(true_x)
    write_site(clean.site, tmp_path / "clean", clean.truth, clean.model_truth)
    assert not (tmp_path / "clean" / "truth" / "model_errors.csv").exists()


def test_tap_offset_and_bad_errors_are_reported():
    """A tap one step (0.0125) off; an unknown branch and a parameter named twice are refused
    with the element named."""
    net = scenario_case("case57").network
    trafo = str(net.branches.index[np.flatnonzero(net.branches["kind"] == "transformer")[0]])
    tap = float(net.branches.at[trafo, "tap"])
    model, truth = model_with_errors(net, [ModelError(trafo, "tap", offset=0.0125)])
    assert model.branches.at[trafo, "tap"] == pytest.approx(tap + 0.0125)
    assert net.branches.at[trafo, "tap"] == tap
    with pytest.raises(ValueError, match="branch 'nowhere' is not in the network"):
        model_with_errors(net, [ModelError("nowhere", "x", factor=1.1)])
    with pytest.raises(ValueError, match="given two errors"):
        model_with_errors(net, [ModelError(trafo, "tap", offset=0.0125),
                                ModelError(trafo, "tap", value=1.0)])
