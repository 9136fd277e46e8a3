"""Choosing which suspects to set aside in a screening round.

With several gross errors, or one large enough to bend the AC estimate, the largest normalized
residual can sit on an innocent neighbour (Mili, Phaniraj & Rousseeuw, IEEE TPWRS 6(2), 1991:
normalized-residual tests break down with interacting bad data). So suspects are tested by
elimination: for the strongest suspect and up to three of its correlated neighbours, each
candidate *unit* — the point alone, the power channels of its device together (a reversed CT
turns P and Q), or all channels its CT feeds together (a wrong CT ratio scales P, Q and |I|) —
is left out of a few probe snapshots, which are estimated again; the unit whose removal lowers
the objective J(x̂) most is set aside (a smaller unit wins a near-tie). Then the next strongest
suspect not yet explained is taken the same way; suspects whose excess the units set aside can
explain (|ρ| × statistic) wait for the next round.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from calibra.estimation.probes import ProbeSet
from calibra.estimation.wls import Estimator

#: Candidates of one cluster tried by elimination (strongest first).
CLUSTER_SIZE = 4
#: Residual correlation above which a candidate belongs to the strongest suspect's cluster.
CLUSTER_CORRELATION = 0.02
#: Convergence tolerance of probe estimates (pu / rad). Near the optimum the objective's error
#: is second order in the state's: 1e-6 leaves J(x̂) exact to far below the differences of
#: about one per snapshot that decide between units.
PROBE_TOLERANCE = 1e-6


@dataclass(frozen=True)
class ScreeningRound:
    """What a screening round knows when it picks suspects.

    ``correlation(i)``: the residual correlation of point i with every point (None when
    unknown); ``stat``: each point's screening statistic; ``base``: points with any data;
    ``probes``: the probe snapshots with ``set_aside`` left out and ``probe_in_service`` their
    branches in service; ``device_of``: each point's device number (−1: none); ``power``: which
    points are power channels (None: all)."""

    estimator: Estimator
    correlation: Callable[[int], np.ndarray | None]
    candidates: np.ndarray
    stat: np.ndarray
    base: np.ndarray
    set_aside: np.ndarray
    probes: ProbeSet
    probe_in_service: np.ndarray
    device_of: np.ndarray
    power: np.ndarray | None = None


@dataclass(frozen=True)
class SuspectSettings:
    """``threshold``: the normalized-residual threshold of the screening; at most
    ``max_points`` points set aside per round."""

    threshold: float
    max_points: int = 32


def pick_suspects(screening: ScreeningRound, settings: SuspectSettings) -> list[int]:
    """Points to set aside this round (see the module docstring)."""
    r = screening
    stat = np.nan_to_num(np.asarray(r.stat, float), nan=0.0, posinf=1e12)
    corr: dict[int, np.ndarray | None] = {}

    def corr_row(i: int) -> np.ndarray | None:
        if i not in corr:
            corr[i] = r.correlation(i)
        return corr[i]

    in_service0 = r.probe_in_service[0] if len(r.probe_in_service) else None
    picked: list[int] = []
    remaining = [int(i) for i in r.candidates[np.argsort(-stat[r.candidates])]]
    while remaining and len(picked) < settings.max_points:
        top = remaining[0]
        row = corr_row(top)
        cluster = [top]
        if row is not None:
            rho = np.nan_to_num(row, nan=0.0, posinf=0.0, neginf=0.0)
            cluster += [j for j in remaining[1:]
                        if abs(rho[j]) > CLUSTER_CORRELATION][:CLUSTER_SIZE - 1]
        units = _units(cluster, r.device_of, r.base & ~r.set_aside, r.power)
        best = _eliminate(r.estimator, units, r.set_aside, picked, r.probes, r.base, in_service0)
        if best is None:
            remaining = remaining[1:]
            continue
        picked += [i for i in best if i not in picked]
        gone = set(best) | set(cluster)
        remaining = [j for j in remaining if j not in gone
                     and not _explained(j, picked, stat, corr_row, settings.threshold)]
        if row is None:
            break  # without correlations, one unit per round
    return picked


def _units(cluster: list[int], device_of: np.ndarray, available: np.ndarray,
           power: np.ndarray | None = None) -> list[list[int]]:
    """The cluster's points alone and, where a device has several channels, its power channels
    together (a reversed CT turns P and Q, not |I|) and all its channels together (a wrong CT
    ratio scales P, Q and |I| alike). ``power``: which points are power channels (default:
    all)."""
    units: list[list[int]] = []
    for i in cluster:
        units.append([i])
        if device_of[i] >= 0:
            group = [int(j) for j in np.flatnonzero((device_of == device_of[i]) & available)]
            channels = [j for j in group if power is None or power[j]]
            for unit in (channels, group):
                if len(unit) > 1:
                    units.append(unit)
    seen, out = set(), []
    for u in units:
        key = tuple(sorted(u))
        if key not in seen:
            seen.add(key)
            out.append(sorted(u))
    return out


def _eliminate(estimator, units, set_aside, picked, probes: ProbeSet, base, in_service0):
    """The unit whose removal lowers the probe objective most (smaller units win near-ties)."""
    trials = []
    before = set_aside.copy()
    before[picked] = True
    # A unit may be set aside only if every bus estimated now stays estimated, in no more
    # islands: partial observability is normal, losing more of it is not.
    now = estimator.observability(base & ~before, in_service0) if in_service0 is not None else None
    for u in units:
        removed = before.copy()
        removed[u] = True
        if now is not None and \
                not estimator.observability(base & ~removed, in_service0).covers(now):
            continue
        if len(units) == 1:
            return u
        trials.append((u, removed))
    if not trials:
        return None
    objectives = probes.objectives([t[1] for t in trials])
    scored = [(obj, len(u), u) for obj, (u, _) in zip(objectives, trials, strict=True)]
    best = min(scored, key=lambda s: s[0])
    # Removing a healthy point lowers J by about one per snapshot: a smaller unit within that
    # allowance of the best one is preferred.
    allowance = 3.0 * len(probes.probes)
    near = [s for s in scored if s[0] <= best[0] + allowance * max(best[1] - s[1], 0)]
    return min(near, key=lambda s: (s[1], s[0]))[2]


def _explained(j: int, picked: list[int], stat: np.ndarray, corr_row, threshold: float) -> bool:
    """Whether j's excess may come from the picked points (|ρ|·statistic of each)."""
    total = 0.0
    for p in picked:
        row = corr_row(p)
        if row is not None:
            rho = np.nan_to_num(row[j], nan=0.0, posinf=0.0, neginf=0.0)
            total += min(abs(rho), 1.0) * stat[p]
    return stat[j] - total < 1.5 * threshold
