"""Shared fixtures: published IEEE cases from pypower with a solved state and full point lists."""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
import pytest

from calibra.estimation.measurement_model import MeasurementModel
from calibra.model.network import Network, network_from_matpower


@dataclass
class SolvedCase:
    network: Network
    vm: np.ndarray
    va: np.ndarray  # radians, relative to the network's reference bus
    result: dict  # pypower's runpf result (external numbering)


def solve_with_pypower(case_fn) -> SolvedCase:
    """Run pypower's Newton power flow (test-only reference) and wrap the solved state."""
    from pypower.api import ppoption, runpf

    ppc = case_fn()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result, success = runpf(ppc, ppoption(VERBOSE=0, OUT_ALL=0))
    assert success
    net = network_from_matpower(ppc)
    vm = result["bus"][:, 7].astype(float)
    va = np.deg2rad(result["bus"][:, 8].astype(float))
    va = va - va[net.reference_position]
    return SolvedCase(net, vm, va, result)


def full_point_list(net: Network, accuracy_flow: float = 0.5, accuracy_inj: float = 1.0,
                    currents: bool = False, full_scale_mw: float = 300.0) -> pd.DataFrame:
    """P and Q at both ends of every branch, P and Q injections at every bus that is not a
    zero-injection bus, and every bus voltage (a 'full measurement set')."""
    rows = []
    for bid in net.branches.index:
        for end in ("from", "to"):
            dev = f"{bid}/{end}"
            for q, unit in (("p_flow", "MW"), ("q_flow", "Mvar")):
                rows.append((f"{bid}:{end}:{q}", q, bid, end, unit, full_scale_mw,
                             accuracy_flow, dev))
            if currents:
                rows.append((f"{bid}:{end}:i", "i_magnitude", bid, end, "A", 2000.0,
                             accuracy_flow, dev))
    for b, bus in net.buses.iterrows():
        if not bus["zero_injection"]:
            for q, unit in (("p_injection", "MW"), ("q_injection", "Mvar")):
                rows.append((f"{b}:{q}", q, b, "", unit, full_scale_mw, accuracy_inj, f"{b}/inj"))
        rows.append((f"{b}:v", "v_magnitude", b, "", "kV", 1.2 * float(bus["kv"]), 0.5, f"{b}/v"))
    pts = pd.DataFrame(rows, columns=["tag", "quantity", "element", "end", "unit", "full_scale",
                                      "accuracy_pct", "device"]).set_index("tag")
    pts["substation"] = "S"
    return pts


@pytest.fixture(scope="session")
def case14_solved() -> SolvedCase:
    from pypower.api import case14

    return solve_with_pypower(case14)


@pytest.fixture(scope="session")
def case57_solved() -> SolvedCase:
    from pypower.api import case57

    return solve_with_pypower(case57)


@pytest.fixture(scope="session")
def case118_solved() -> SolvedCase:
    from pypower.api import case118

    return solve_with_pypower(case118)


@pytest.fixture(scope="session")
def pegase89_solved() -> SolvedCase:
    """PEGASE 89-bus European model (pandapower's networks, test-only) solved by pypower."""
    from tests.published import published_case

    return solve_with_pypower(lambda: published_case("case89pegase"))


@pytest.fixture(scope="session")
def iceland_solved() -> SolvedCase:
    """The Icelandic grid (189 buses; series capacitor, bus couplers) solved by pypower."""
    from tests.published import published_case

    return solve_with_pypower(lambda: published_case("iceland"))


def model_and_truth(case: SolvedCase, **kw) -> tuple[MeasurementModel, np.ndarray]:
    model = MeasurementModel.from_points(case.network, full_point_list(case.network, **kw))
    return model, model.functions.evaluate(case.vm, case.va)
