"""Published networks beyond the IEEE set, from pandapower's ``networks`` module (a test and
benchmark dependency only, like pypower): PEGASE (European transmission models), the GB
reduced network, the Icelandic grid.

pandapower's MATPOWER export gives the version 2 case arrays (bus, gen, branch, baseMVA);
isolated buses (type 4), out-of-service branches and generators are dropped, as a utility's
model of the energized network would be.
"""

from __future__ import annotations

import functools
import logging
import warnings

import numpy as np

#: Networks used by the tests and benchmarks, by pandapower name.
PUBLISHED = ("case89pegase", "iceland", "GBreducednetwork", "case1354pegase", "case2869pegase")


@functools.lru_cache(maxsize=8)
def _cached(name: str) -> dict:
    import pandapower.networks as pn
    from pandapower.converter.matpower import to_mpc

    logging.getLogger("pandapower").setLevel(logging.ERROR)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        net = getattr(pn, name)()
        mpc = to_mpc(net, init="flat")["mpc"]
    bus = np.asarray(mpc["bus"], float)
    branch = np.asarray(mpc["branch"], float)
    gen = np.asarray(mpc["gen"], float)
    bus = bus[bus[:, 1] != 4]
    ids = bus[:, 0].astype(int)
    branch = branch[(branch[:, 10] > 0) & np.isin(branch[:, 0].astype(int), ids)
                    & np.isin(branch[:, 1].astype(int), ids)]
    gen = gen[(gen[:, 7] > 0) & np.isin(gen[:, 0].astype(int), ids)]
    return {"version": "2", "baseMVA": float(mpc["baseMVA"]), "bus": bus, "gen": gen,
            "branch": branch}


def published_case(name: str) -> dict:
    """A MATPOWER-style case dict of a pandapower network (fresh copies of the arrays)."""
    case = _cached(name)
    return {k: (v.copy() if isinstance(v, np.ndarray) else v) for k, v in case.items()}


def published_grid_case(name: str, frequency_hz: float = 50.0):
    """The network with its base operating point as a simulator :class:`GridCase`."""
    from calibra.simulate.case import grid_case_from_matpower

    return grid_case_from_matpower(published_case(name), name=name, frequency_hz=frequency_hz)
