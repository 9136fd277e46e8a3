"""The measurement model of a site: analog points as per-unit rows, zero-injection constraints."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from calibra.estimation.measurements import (
    I_MAG,
    P_INJ,
    Q_INJ,
    QUANTITY_CODE,
    V_MAG,
    MeasurementFunctions,
)
from calibra.model.network import Network
from calibra.model.points import analog_points, measurement_sigma

SQRT3 = np.sqrt(3.0)


@dataclass
class MeasurementModel:
    """Analog points of a point list as measurement rows of the estimator.

    ``to_pu[i]`` converts point i's value from its own unit to per unit; ``sigma_pu`` is its
    standard deviation in per unit. ``constraints`` are the zero-injection equalities
    (P and Q at every zero-injection bus), held exactly by the estimator.
    """

    network: Network
    tags: pd.Index
    functions: MeasurementFunctions
    constraints: MeasurementFunctions
    to_pu: np.ndarray
    sigma_pu: np.ndarray
    bus_of_point: np.ndarray  # bus position a point is located at (terminal bus or the bus)

    @property
    def m(self) -> int:
        return len(self.tags)

    @property
    def code(self) -> np.ndarray:
        return self.functions.code

    @classmethod
    def from_points(cls, network: Network, points: pd.DataFrame) -> MeasurementModel:
        """Build rows for every analog point (``branch_status`` points are left out)."""
        pts = analog_points(points)
        code = pts["quantity"].map(QUANTITY_CODE).to_numpy(np.int64)
        is_bus = np.isin(code, (P_INJ, Q_INJ, V_MAG))
        element = np.zeros(len(pts), np.int64)
        elements = pts["element"].astype(str)
        if is_bus.any():
            element[is_bus] = network.bus_positions(elements[is_bus])
        if (~is_bus).any():
            element[~is_bus] = network.branch_positions(elements[~is_bus])
        end = np.where(pts["end"].astype(str).str.strip().str.lower() == "to", 1, 0)
        end = np.where(is_bus, 0, end)
        funcs = MeasurementFunctions(network, code, element, end)

        adm = network.branch_admittances(np.ones(network.n_branch, bool))
        bus_at = np.where(is_bus, element, np.where(end == 1, adm.t[element], adm.f[element]))
        kv = network.buses["kv"].to_numpy(float)[bus_at]
        base = network.base_mva
        to_pu = np.full(len(pts), 1.0 / base)
        to_pu[code == V_MAG] = 1.0 / kv[code == V_MAG]
        # Base current in A at the terminal bus: S_base / (√3 · V_base).
        i_base = base * 1e3 / (SQRT3 * kv)
        to_pu[code == I_MAG] = 1.0 / i_base[code == I_MAG]
        sigma_pu = measurement_sigma(pts).to_numpy(float) * to_pu

        zi = network.zero_injection_positions
        cons = MeasurementFunctions(
            network, np.r_[np.full(zi.size, P_INJ), np.full(zi.size, Q_INJ)], np.r_[zi, zi],
            np.zeros(2 * zi.size, np.int64),
        )
        return cls(network, pd.Index(pts.index, name="tag"), funcs, cons, to_pu, sigma_pu, bus_at)

    def to_per_unit(self, values: np.ndarray) -> np.ndarray:
        """Convert values in the points' own units (… × m) to per unit."""
        return values * self.to_pu

    def from_per_unit(self, values: np.ndarray) -> np.ndarray:
        return values / self.to_pu
