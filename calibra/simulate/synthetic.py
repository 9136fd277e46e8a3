"""Large test networks made by joining copies of a published case with tie lines.

Copy c of a case gets bus ids ``"c<copy>-<bus>"``; consecutive copies are joined by tie lines
between buses that carry generation, so every copy keeps its own balance and the whole is one
connected network. Only copy 0 keeps the slack; the other copies' slack buses become PV buses.
Used by the benchmarks (a ~2,000-bus network from IEEE 118) — an artificial network, not a
published one.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from calibra.model.network import Network
from calibra.simulate.case import GridCase, grid_case_from_matpower

#: Tie line impedance (pu on 100 MVA), a short 138 kV-class line (common practice, no source).
TIE_R, TIE_X, TIE_B = 0.005, 0.04, 0.01


def joined_copies(ppc: dict, copies: int, ties_per_join: int = 2, seed: int = 0,
                  name: str | None = None) -> GridCase:
    """``copies`` copies of the case (at most 100), each joined to the next by
    ``ties_per_join`` tie lines."""
    if not 1 <= copies <= 100:
        raise ValueError("between 1 and 100 copies")
    base = grid_case_from_matpower(ppc)
    net = base.network
    rng = np.random.default_rng(seed)
    gen_buses = list(base.gen_mw.index[base.gen_mw > 0])
    buses, branches = [], []
    series = {k: [] for k in ("load_mw", "load_mvar", "gen_mw", "gen_mvar", "v_set", "pv")}
    for c in range(copies):
        def rid(b, c=c):
            return f"c{c}-{b}"

        b = net.buses.copy()
        b.index = [rid(x) for x in b.index]
        # A fixed-width copy number keeps tag prefixes apart ("C01-11" vs "C11-1").
        b["substation"] = [f"C{c:02d}-{s}" for s in net.buses["substation"]]
        b["name"] = b.index
        buses.append(b)
        br = net.branches.copy()
        br.index = [f"c{c}-{x}" for x in br.index]
        br["from_bus"] = [rid(x) for x in br["from_bus"]]
        br["to_bus"] = [rid(x) for x in br["to_bus"]]
        br["name"] = br.index
        branches.append(br)
        for key in series:
            s = getattr(base, key).copy()
            s.index = [rid(x) for x in s.index]
            if key == "pv" and c > 0:
                s[rid(net.reference_bus)] = True
            series[key].append(s)
        if c > 0:
            for t in range(ties_per_join):
                a, z = rng.choice(gen_buses, 2)
                branches.append(pd.DataFrame({
                    "from_bus": [f"c{c - 1}-{a}"], "to_bus": [rid(z)], "r": [TIE_R],
                    "x": [TIE_X], "b": [TIE_B], "tap": [1.0], "shift_deg": [0.0],
                    "kind": ["line"], "in_service": [True], "name": [f"tie{c}-{t}"],
                }, index=[f"tie{c}-{t}"]))
    network = Network(name or f"{copies} joined copies", net.base_mva, pd.concat(buses),
                      pd.concat(branches), f"c0-{net.reference_bus}", net.frequency_hz)
    return GridCase(network, **{k: pd.concat(v) for k, v in series.items()})
