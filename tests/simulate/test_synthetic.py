"""Joined copies of a published case (calibra.simulate.synthetic), used by the benchmarks."""

from __future__ import annotations

import numpy as np
from pypower.api import case14

from calibra.simulate.metering import MeteringOptions, make_point_list
from calibra.simulate.synthetic import joined_copies


def test_many_copies_give_unique_tags_and_one_connected_network():
    """Twelve copies of IEEE 14 (pypower case14): copy numbers of one and two digits used to
    make equal substation codes ("C1-11" and "C11-1"); every tag must be unique (common
    practice, no source) and the network one island."""
    grid = joined_copies(case14(), 12)
    net = grid.network
    assert net.n_bus == 12 * 14
    points = make_point_list(grid, options=MeteringOptions(
        branch_end_coverage=1.0, injection_coverage=1.0, voltage_coverage=1.0), seed=1)
    assert points.index.name == "tag" and points.index.is_unique
    # Connectivity: a walk over in-service branches from the reference reaches every bus.
    pos = {b: i for i, b in enumerate(net.buses.index)}
    adj = [[] for _ in range(net.n_bus)]
    for f, t in zip(net.branches["from_bus"], net.branches["to_bus"], strict=True):
        adj[pos[f]].append(pos[t])
        adj[pos[t]].append(pos[f])
    seen = np.zeros(net.n_bus, bool)
    stack = [pos[net.reference_bus]]
    while stack:
        b = stack.pop()
        if not seen[b]:
            seen[b] = True
            stack += adj[b]
    assert seen.all()
