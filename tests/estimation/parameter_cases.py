"""Published networks solved by pypower's power flow at several loadings (test-only reference),
with a network model that carries one wrong parameter."""

from __future__ import annotations

import functools
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from calibra.estimation.measurement_model import MeasurementModel
from calibra.model.network import Network, network_from_matpower
from calibra.model.parameters import NetworkParameter, model_value, with_parameters

#: Load levels of the snapshots, as shares of the case's published load and generation (our
#: own choice: a working day's spread).
LOADINGS = (0.65, 0.8, 0.9, 1.0, 1.08, 1.15)


@dataclass
class SolvedSnapshots:
    network: Network  # the true network
    vm: np.ndarray  # snapshots × buses
    va: np.ndarray  # radians, relative to the reference bus
    results: list  # pypower's runpf results


def _load_case(case_name: str) -> dict:
    if case_name.startswith("case") and not case_name.endswith("pegase"):
        import pypower.api as pp

        return getattr(pp, case_name)()
    from tests.published import published_case

    return published_case(case_name)


@functools.lru_cache(maxsize=8)
def solved_snapshots(case_name: str, loadings: tuple[float, ...] = LOADINGS) -> SolvedSnapshots:
    """pypower's Newton power flow (runpf) of the case with loads and generation scaled."""
    from pypower.api import ppoption, runpf

    net = network_from_matpower(_load_case(case_name))
    vms, vas, results = [], [], []
    for share in loadings:
        ppc = _load_case(case_name)
        ppc["bus"][:, 2:4] *= share
        ppc["gen"][:, 1] *= share
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            result, ok = runpf(ppc, ppoption(VERBOSE=0, OUT_ALL=0))
        assert ok, f"{case_name} at {share} of its load did not solve"
        va = np.deg2rad(result["bus"][:, 8].astype(float))
        vms.append(result["bus"][:, 7].astype(float))
        vas.append(va - va[net.reference_position])
        results.append(result)
    return SolvedSnapshots(net, np.array(vms), np.array(vas), results)


def noise_free_values(solved: SolvedSnapshots, points: pd.DataFrame) -> np.ndarray:
    """Every point's per-unit value in each solved snapshot, on the TRUE network."""
    model = MeasurementModel.from_points(solved.network, points)
    return np.array([model.functions.evaluate(v, a) for v, a in zip(solved.vm, solved.va,
                                                                    strict=True)])


def wrong_model(solved: SolvedSnapshots, parameter: NetworkParameter, *, factor=None,
                offset=None) -> tuple[Network, float]:
    """The network model with the parameter multiplied by ``factor`` or shifted by ``offset``;
    returns it and the true value."""
    true = model_value(solved.network, parameter)
    wrong = true * factor if factor is not None else true + offset
    return with_parameters(solved.network, {parameter: wrong}), true


def pypower_flows(result: dict) -> np.ndarray:
    """PF, QF, PT, QT of every branch in MW / Mvar (pypower's branch columns 13-16)."""
    return np.asarray(result["branch"][:, 13:17], float)
