"""Shared small simulations (short periods keep the suite fast)."""

import pytest
from pypower.api import case57, case118

from calibra.simulate.case import grid_case_from_matpower
from calibra.simulate.metering import make_point_list
from calibra.simulate.telemetry import TelemetryOptions, simulate_site


@pytest.fixture(scope="session")
def grid118():
    return grid_case_from_matpower(case118(), name="case118")


@pytest.fixture(scope="session")
def grid57():
    return grid_case_from_matpower(case57(), name="case57")


@pytest.fixture(scope="session")
def clean118(grid118):
    """Ten hours of clean telemetry on IEEE 118 with a planned outage on a Tuesday morning."""
    points = make_point_list(grid118, seed=5)
    return simulate_site(grid118, points, start="2027-03-02 06:00", periods=600,
                         timezone="America/Chicago", seed=11, faults=False,
                         options=TelemetryOptions(rtu_outage_hours=1.5))
