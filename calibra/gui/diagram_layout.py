"""Where a point sits: its substation and the neighbouring buses, laid out automatically.

Free of Qt. The layout is a force-directed one (after Fruchterman & Reingold, "Graph drawing
by force-directed placement", Software: Practice and Experience 21(11), 1991): branches pull
their buses together, every pair of buses pushes apart, and buses of one substation are held
together by extra springs. The start is seeded, so one site always gets the same picture.
Coordinates are in a unit box; the drawing code scales them.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from calibra.model.points import BRANCH_END_QUANTITIES, BUS_QUANTITIES
from calibra.model.site import Site


@dataclass
class BranchLine:
    """A branch between two drawn buses (positions into ``Diagram.buses``)."""

    branch: str
    a: int
    b: int
    kind: str
    in_service: bool
    lane: float = 0.0  #: sideways offset of parallel circuits, in lanes (0 = centre line)


@dataclass
class MeterMark:
    """One device's points at one place: a branch end or a bus."""

    device: str
    tags: list[str]
    bus: int
    x: float
    y: float
    branch: str = ""
    end: str = ""


@dataclass
class Diagram:
    """A substation and its neighbours, ready to draw."""

    substation: str
    buses: list[str]
    substation_of: list[str]
    positions: np.ndarray  #: n × 2 in [0, 1]
    branches: list[BranchLine] = field(default_factory=list)
    meters: list[MeterMark] = field(default_factory=list)

    def meter_of(self, tag: str) -> MeterMark | None:
        for m in self.meters:
            if tag in m.tags:
                return m
        return None


def neighbourhood(site: Site, substation: str, hops: int = 1) -> tuple[list[str], list[str]]:
    """Buses of ``substation`` and those up to ``hops`` branches away, and the branches among
    them (ids, sorted)."""
    net = site.network
    buses = net.buses
    chosen = set(buses.index[buses["substation"].astype(str) == str(substation)])
    br = net.branches
    for _ in range(max(hops, 0)):
        touch = br["from_bus"].isin(chosen) | br["to_bus"].isin(chosen)
        chosen |= set(br.loc[touch, "from_bus"]) | set(br.loc[touch, "to_bus"])
    inside = br["from_bus"].isin(chosen) & br["to_bus"].isin(chosen)
    return sorted(chosen), sorted(br.index[inside])


def force_layout(n: int, edges: np.ndarray, groups: np.ndarray, seed: int = 0,
                 iterations: int = 300) -> np.ndarray:
    """Positions (n × 2, in [0, 1]) of ``n`` nodes joined by ``edges`` (e × 2 int); nodes with
    the same ``groups`` label are kept close."""
    if n == 0:
        return np.zeros((0, 2))
    if n == 1:
        return np.array([[0.5, 0.5]])
    rng = np.random.default_rng(seed)
    pos = rng.random((n, 2))
    weight = np.zeros((n, n))
    for a, b in np.asarray(edges, int).reshape(-1, 2):
        if a != b:
            weight[a, b] = weight[b, a] = 1.0
    same = groups[:, None] == groups[None, :]
    weight = np.where(same & ~np.eye(n, dtype=bool), np.maximum(weight, 0.6) * 2.5, weight)
    k = np.sqrt(1.0 / n)
    for step in range(iterations):
        temperature = 0.1 * (1.0 - step / iterations) + 0.002
        delta = pos[:, None, :] - pos[None, :, :]
        dist = np.maximum(np.linalg.norm(delta, axis=2), 1e-6)
        unit = delta / dist[:, :, None]
        push = (k * k / dist)[:, :, None] * unit
        pull = (weight * dist * dist / k)[:, :, None] * unit
        force = (push - pull).sum(axis=1)
        length = np.maximum(np.linalg.norm(force, axis=1), 1e-12)
        pos += force / length[:, None] * np.minimum(length, temperature)[:, None]
    return _fit_unit_box(pos)


MIN_BUS_GAP = 0.11  #: buses closer than this (unit-box units) are pushed apart
BOX_PAD = 0.075  #: a substation's box reaches this far beyond its outermost buses


def group_boxes(pos: np.ndarray, groups: np.ndarray, pad: float = BOX_PAD) -> np.ndarray:
    """The box (x0, y0, x1, y1) of every group label 0…g−1 around its members."""
    g = int(groups.max()) + 1 if groups.size else 0
    out = np.zeros((g, 4))
    for j in range(g):
        members = pos[groups == j]
        out[j, :2], out[j, 2:] = members.min(axis=0) - pad, members.max(axis=0) + pad
    return out


def spread(pos: np.ndarray, groups: np.ndarray, rounds: int = 12) -> np.ndarray:
    """Make room for the drawing: buses at least ``MIN_BUS_GAP`` apart, and the boxes of
    different substations apart (each moved as a whole), in the unit box. Fitting into the box
    shrinks the gaps again, so push and fit alternate until nothing needs to move."""
    if len(pos) < 2:
        return pos
    for _ in range(rounds):
        pos, moved = _push_apart(pos, groups)
        pos = _fit_unit_box(pos)
        if not moved:
            break
    return pos


def _push_apart(pos: np.ndarray, groups: np.ndarray,
                iterations: int = 300) -> tuple[np.ndarray, bool]:
    """One round of :func:`spread` without fitting; also whether anything moved."""
    pos = pos.copy()
    n = len(pos)
    any_moved = False
    for _ in range(iterations):
        moved = False
        delta = pos[:, None, :] - pos[None, :, :]
        dist = np.linalg.norm(delta, axis=2) + np.eye(n)
        close = np.triu(dist < MIN_BUS_GAP, 1)
        for a, b in zip(*np.nonzero(close), strict=True):
            d = delta[a, b] / max(dist[a, b], 1e-9) if dist[a, b] > 1e-9 else np.array([1., 0.])
            step = (MIN_BUS_GAP - dist[a, b]) / 2 + 1e-4
            pos[a] += d * step
            pos[b] -= d * step
            moved = True
        boxes = group_boxes(pos, groups)
        for a in range(len(boxes)):
            for b in range(a + 1, len(boxes)):
                over = np.minimum(boxes[a, 2:], boxes[b, 2:]) - np.maximum(boxes[a, :2],
                                                                          boxes[b, :2])
                if (over > -0.03).all():  # overlapping, or closer than a small gap
                    axis = int(np.argmin(over))
                    ca = (boxes[a, :2] + boxes[a, 2:]) / 2
                    cb = (boxes[b, :2] + boxes[b, 2:]) / 2
                    sign = 1.0 if ca[axis] >= cb[axis] else -1.0
                    step = np.zeros(2)
                    step[axis] = sign * (over[axis] + 0.03) / 2 + sign * 1e-4
                    pos[groups == a] += step
                    pos[groups == b] -= step
                    moved = True
        any_moved |= moved
        if not moved:
            break
    return pos, any_moved


def _fit_unit_box(pos: np.ndarray, margin: float = 0.06) -> np.ndarray:
    """Scale into [margin, 1 − margin] keeping the aspect ratio, centred."""
    lo, hi = pos.min(axis=0), pos.max(axis=0)
    span = max(float((hi - lo).max()), 1e-9)
    out = (pos - lo) / span * (1 - 2 * margin) + margin
    return out + (1 - (out.max(axis=0) + out.min(axis=0))) / 2


def substation_diagram(site: Site, substation: str, hops: int = 1, seed: int = 0) -> Diagram:
    """The diagram around ``substation``: buses, branches (parallel circuits side by side) and
    one mark per device and place for the analog points on the drawn buses and branch ends."""
    net = site.network
    buses, branches = neighbourhood(site, substation, hops)
    pos_of = {b: i for i, b in enumerate(buses)}
    subs = [str(net.buses.at[b, "substation"]) for b in buses]
    br = net.branches.loc[branches]
    edges = np.array([[pos_of[f], pos_of[t]] for f, t in zip(br["from_bus"], br["to_bus"],
                                                              strict=True)], int)
    groups = pd.factorize(pd.Series(subs))[0]
    positions = spread(force_layout(len(buses), edges, groups, seed), groups)
    lines = _branch_lines(br, pos_of)
    diagram = Diagram(str(substation), buses, subs, positions, lines)
    diagram.meters = _meters(site, diagram, {ln.branch: ln for ln in lines})
    return diagram


def _branch_lines(br: pd.DataFrame, pos_of: dict[str, int]) -> list[BranchLine]:
    lines = []
    pairs: dict[tuple[int, int], list[str]] = {}
    for branch, row in br.iterrows():
        a, b = pos_of[row["from_bus"]], pos_of[row["to_bus"]]
        pairs.setdefault((min(a, b), max(a, b)), []).append(str(branch))
    in_service = br["in_service"] if "in_service" in br.columns else pd.Series(True, br.index)
    for ids in pairs.values():
        for j, branch in enumerate(ids):
            row = br.loc[branch]
            lines.append(BranchLine(branch, pos_of[row["from_bus"]], pos_of[row["to_bus"]],
                                    str(row.get("kind", "line")), bool(in_service[branch]),
                                    lane=j - (len(ids) - 1) / 2))
    return lines


LANE = 0.035  #: sideways spacing of parallel circuits (unit-box units)
END_SHARE = 0.28  #: a branch-end meter sits this far along the branch from its bus


def lane_offset(p: np.ndarray, q: np.ndarray, lane: float) -> np.ndarray:
    """The sideways shift of a parallel circuit drawn from p to q."""
    d = q - p
    n = np.array([-d[1], d[0]]) / max(float(np.linalg.norm(d)), 1e-9)
    return n * lane * LANE


def _meters(site: Site, diagram: Diagram, lines: dict[str, BranchLine]) -> list[MeterMark]:
    pts = site.points
    pos = diagram.positions
    pos_of = {b: i for i, b in enumerate(diagram.buses)}
    net = site.network
    marks: dict[tuple, MeterMark] = {}
    drawn = pts["element"].astype(str).isin(set(lines) | set(pos_of))
    for tag, pt in pts[drawn].iterrows():
        q = str(pt["quantity"])
        element, end = str(pt["element"]), str(pt.get("end", "") or "")
        if q in BRANCH_END_QUANTITIES and element in lines and end in ("from", "to"):
            line = lines[element]
            bus_id = net.branches.at[element, f"{end}_bus"]
            here, there = (line.a, line.b) if end == "from" else (line.b, line.a)
            p, r = pos[here], pos[there]
            xy = p + END_SHARE * (r - p) + lane_offset(pos[line.a], pos[line.b], line.lane)
            key = (str(pt["device"]), element, end)
            bus = pos_of[bus_id]
        elif q in BUS_QUANTITIES and element in pos_of:
            bus = pos_of[element]
            xy = pos[bus] + (np.array([0.0, 0.055]) if q == "v_magnitude"
                             else np.array([0.0, -0.055]))
            key = (str(pt["device"]), element, "voltage" if q == "v_magnitude" else "injection")
        else:
            continue
        mark = marks.get(key)
        if mark is None:
            mark = marks[key] = MeterMark(str(pt["device"]), [], bus, float(xy[0]), float(xy[1]),
                                          element if q in BRANCH_END_QUANTITIES else "", end)
        mark.tags.append(str(tag))
    return list(marks.values())
