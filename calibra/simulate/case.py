"""A network with its base operating point: loads, generation, PV set points.

The network model (:class:`~calibra.model.network.Network`) describes only the grid. To
simulate telemetry we also need where load and generation are and how large they are at a
reference moment; :class:`GridCase` holds that, and :meth:`GridCase.solve` gives its power flow.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from calibra.model.network import Network, network_from_matpower
from calibra.simulate.powerflow import PowerFlowResult, solve_power_flow


@dataclass
class GridCase:
    """Network plus base operating point, all Series indexed by bus id.

    ``load_mw``/``load_mvar``: load at the base point; ``gen_mw``/``gen_mvar``: generation
    (``gen_mvar`` matters only at PQ buses); ``v_set``: voltage set point (pu) of PV buses and
    the slack; ``pv``: True at buses whose generators hold the voltage. The slack is the
    network's reference bus.
    """

    network: Network
    load_mw: pd.Series
    load_mvar: pd.Series
    gen_mw: pd.Series
    gen_mvar: pd.Series
    v_set: pd.Series
    pv: pd.Series

    def __post_init__(self) -> None:
        idx = self.network.buses.index
        for name in ("load_mw", "load_mvar", "gen_mw", "gen_mvar", "v_set", "pv"):
            series = getattr(self, name)
            series = series.copy()
            series.index = series.index.astype(str)
            fill = False if name == "pv" else (1.0 if name == "v_set" else 0.0)
            series = series.reindex(idx, fill_value=fill).infer_objects()
            setattr(self, name, series.where(series.notna(), fill))
        self.pv = self.pv.astype(bool)
        self.pv[self.network.reference_bus] = False

    @property
    def slack(self) -> str:
        return self.network.reference_bus

    @property
    def generator_buses(self) -> pd.Index:
        """Buses with generation (including the slack)."""
        has = (self.gen_mw.abs() > 0) | (self.gen_mvar.abs() > 0) | self.pv
        has[self.slack] = True
        return self.network.buses.index[has.to_numpy()]

    @property
    def load_buses(self) -> pd.Index:
        has = (self.load_mw.abs() > 0) | (self.load_mvar.abs() > 0)
        return self.network.buses.index[has.to_numpy()]

    def net_injection(self) -> tuple[np.ndarray, np.ndarray]:
        """Base net injections (generation minus load) in MW and Mvar, in bus order."""
        p = (self.gen_mw - self.load_mw).to_numpy(float)
        q = (self.gen_mvar - self.load_mvar).to_numpy(float)
        return p, q

    def solve(self, in_service: np.ndarray | None = None) -> PowerFlowResult:
        """Power flow of the base operating point."""
        p, q = self.net_injection()
        return solve_power_flow(
            self.network, p, q, self.v_set.to_numpy(float), self.pv.to_numpy(bool),
            in_service=in_service,
        )


def grid_case_from_matpower(ppc: dict, name: str = "case", frequency_hz: float = 60.0) -> GridCase:
    """A :class:`GridCase` from a MATPOWER/pypower case dict (in-service generators only).

    PV buses are those of bus type 2 with an in-service generator; set points come from the
    generators' VG, as in a standard Newton power flow.
    """
    net = network_from_matpower(ppc, name=name, frequency_hz=frequency_hz)
    bus = np.asarray(ppc["bus"], float)
    gen = np.asarray(ppc["gen"], float)
    gen = gen[gen[:, 7] > 0]
    ids = pd.Index([str(int(b)) for b in bus[:, 0]])
    gen_ids = [str(int(g)) for g in gen[:, 0]]
    gen_mw = pd.Series(gen[:, 1], index=gen_ids).groupby(level=0).sum()
    gen_mvar = pd.Series(gen[:, 2], index=gen_ids).groupby(level=0).sum()
    v_set = pd.Series(bus[:, 7], index=ids)
    v_set.update(pd.Series(gen[:, 5], index=gen_ids).groupby(level=0).first())
    with_gen = ids.isin(gen_ids)
    pv = pd.Series((bus[:, 1] == 2) & with_gen, index=ids)
    return GridCase(
        net,
        load_mw=pd.Series(bus[:, 2], index=ids),
        load_mvar=pd.Series(bus[:, 3], index=ids),
        gen_mw=gen_mw,
        gen_mvar=gen_mvar,
        v_set=v_set,
        pv=pv,
    )
