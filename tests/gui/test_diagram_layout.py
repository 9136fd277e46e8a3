"""The neighbourhood diagram's automatic layout (Qt-free).

Force-directed placement after Fruchterman & Reingold (Software: Practice and Experience
21(11), 1991): joined nodes end up close, all nodes apart; a cycle is drawn as a ring.
"""

from __future__ import annotations

import numpy as np

from calibra.gui.diagram_layout import force_layout, neighbourhood, substation_diagram


def _distances(pos):
    d = np.linalg.norm(pos[:, None] - pos[None], axis=2)
    np.fill_diagonal(d, np.inf)
    return d


def test_deterministic_and_inside_the_box():
    edges = np.array([[0, 1], [1, 2], [2, 3], [3, 0], [1, 4]])
    groups = np.array([0, 0, 1, 1, 2])
    a = force_layout(5, edges, groups, seed=3)
    b = force_layout(5, edges, groups, seed=3)
    assert np.array_equal(a, b)
    assert (a >= 0).all() and (a <= 1).all()
    assert _distances(a).min() > 0.1


def test_a_ring_is_drawn_as_a_ring():
    # Each node of a cycle should have its two cycle neighbours as its two nearest nodes.
    n = 8
    edges = np.array([[i, (i + 1) % n] for i in range(n)])
    pos = force_layout(n, edges, np.arange(n), seed=0)
    d = _distances(pos)
    for i in range(n):
        nearest = set(np.argsort(d[i])[:2])
        assert nearest == {(i - 1) % n, (i + 1) % n}


def test_joined_buses_are_closer_than_unjoined():
    rng = np.random.default_rng(1)
    n = 14
    edges = np.array([[i, i + 1] for i in range(n - 1)] + [[0, 7], [3, 11]])
    pos = force_layout(n, edges, rng.integers(0, 4, n), seed=5)
    d = _distances(pos)
    joined = np.zeros((n, n), bool)
    joined[edges[:, 0], edges[:, 1]] = joined[edges[:, 1], edges[:, 0]] = True
    off = ~joined & ~np.eye(n, dtype=bool)
    assert d[joined].mean() < 0.7 * d[off].mean()


def test_substation_diagram_on_the_small_site(reviewed):
    site, _ = reviewed
    buses, branches = neighbourhood(site, "BRN")
    net = site.network
    own = set(net.buses.index[net.buses["substation"] == "BRN"])
    assert own <= set(buses)
    for b in branches:  # every branch drawn joins two drawn buses
        assert {net.branches.at[b, "from_bus"], net.branches.at[b, "to_bus"]} <= set(buses)
    diagram = substation_diagram(site, "BRN")
    assert diagram.buses == buses and len(diagram.branches) == len(branches)
    mark = diagram.meter_of("BRN.110.MRG1.MW")
    assert mark is not None and "BRN.110.MRG1.MVAR" in mark.tags  # one device, one mark
    element, end = site.points.loc["BRN.110.MRG1.MW", ["element", "end"]]
    here = diagram.buses.index(net.branches.at[element, f"{end}_bus"])
    there = diagram.buses.index(net.branches.at[element, "to_bus" if end == "from"
                                                else "from_bus"])
    xy = np.array([mark.x, mark.y])
    assert (np.linalg.norm(xy - diagram.positions[here])
            < np.linalg.norm(xy - diagram.positions[there]))
