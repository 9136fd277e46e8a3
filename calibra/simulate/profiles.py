"""Load and generation time series at one-minute resolution, and planned outages.

Each load bus mixes three daily shapes (households, offices and shops, industry) with its own
weights, a few minutes of random shift and a weekend behaviour, plus a slowly wandering
random deviation. Dispatchable generators follow the total load with fixed participation
factors (their base-case share); the slack covers losses and whatever else is left. Variable
generation (a wind farm, say) follows its own slowly varying random output. The shapes and
their parameters are our own choice (common practice, no source).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy.signal import lfilter

from calibra.simulate.case import GridCase

ARCHETYPES = ("residential", "commercial", "industrial")


@dataclass(frozen=True)
class PlannedOutage:
    """A branch switched out from ``start`` (inclusive) to ``end`` (exclusive)."""

    branch: str
    start: pd.Timestamp
    end: pd.Timestamp


@dataclass
class OperatingSeries:
    """What drives the power flow of each snapshot: (K, n_bus) MW/Mvar and (K, n_branch) status."""

    index: pd.DatetimeIndex
    load_mw: np.ndarray
    load_mvar: np.ndarray
    gen_mw: np.ndarray
    gen_mvar: np.ndarray
    v_set: np.ndarray
    pv: np.ndarray
    in_service: np.ndarray
    outages: list[PlannedOutage] = field(default_factory=list)

    def net_injection(self) -> tuple[np.ndarray, np.ndarray]:
        return self.gen_mw - self.load_mw, self.gen_mvar - self.load_mvar


def _bump(hour: np.ndarray, centre: float, width: float) -> np.ndarray:
    d = (hour - centre + 12.0) % 24.0 - 12.0
    return np.exp(-0.5 * (d / width) ** 2)


def _plateau(hour: np.ndarray, start: float, stop: float, edge: float = 0.7) -> np.ndarray:
    return 1.0 / (1.0 + np.exp(-(hour - start) / edge * 4)) - 1.0 / (
        1.0 + np.exp(-(hour - stop) / edge * 4)
    )


def archetype_shape(kind: str, hour: np.ndarray, weekend: np.ndarray) -> np.ndarray:
    """Relative demand (peak near 1) of one archetype at local ``hour`` (float) and weekend flag."""
    if kind == "residential":
        work = 0.5 + 0.2 * _bump(hour, 7.3, 1.1) + 0.45 * _bump(hour, 19.2, 2.0)
        rest = 0.52 + 0.22 * _bump(hour, 10.0, 2.0) + 0.42 * _bump(hour, 19.0, 2.2)
        trough = 0.12 * _bump(hour, 3.8, 1.8)
        return np.where(weekend, rest, work) - trough
    if kind == "commercial":
        work = 0.38 + 0.6 * _plateau(hour, 7.8, 18.3)
        rest = 0.35 + 0.18 * _plateau(hour, 9.5, 16.5)
        return np.where(weekend, rest, work)
    if kind == "industrial":
        work = 0.78 + 0.18 * _plateau(hour, 5.9, 21.9, 0.3)
        return np.where(weekend, 0.66 + 0.04 * _bump(hour, 12.0, 4.0), work)
    raise ValueError(f"unknown load archetype {kind!r}; use one of {ARCHETYPES}")


def _wander(rng: np.random.Generator, k: int, n: int, sigma: float, minutes: float) -> np.ndarray:
    """Stationary first-order autoregressive noise, (k, n), std ``sigma``, time constant."""
    a = np.exp(-1.0 / minutes)
    e = rng.standard_normal((k, n)) * sigma * np.sqrt(1.0 - a * a)
    x0 = rng.standard_normal(n) * sigma
    out = lfilter([1.0], [1.0, -a], e, axis=0, zi=(a * x0)[None, :])[0]
    return out


def load_profiles(
    index: pd.DatetimeIndex,
    timezone: str,
    n: int,
    rng: np.random.Generator,
    *,
    mix: np.ndarray | None = None,
    noise: float = 0.02,
) -> np.ndarray:
    """Relative load (K, n) with peaks near 1; ``mix`` (n, 3) weights the archetypes per bus."""
    local = index.tz_convert(timezone)
    weights = rng.dirichlet(np.ones(3), size=n) if mix is None else np.asarray(mix, float)
    weights = weights / weights.sum(axis=1, keepdims=True)
    shift_h = rng.uniform(-0.33, 0.33, n)
    hour = np.asarray(local.hour + local.minute / 60.0, float)[:, None] + shift_h[None, :]
    hour = hour % 24.0
    weekend = np.asarray(local.day_of_week >= 5)[:, None]
    shape = sum(
        weights[None, :, i] * archetype_shape(kind, hour, weekend)
        for i, kind in enumerate(ARCHETYPES)
    )
    shape = shape * (1.0 + _wander(rng, len(index), n, noise, 25.0))
    shape = shape * (1.0 + rng.standard_normal(shape.shape) * noise * 0.15)
    return shape


def wind_profile(index: pd.DatetimeIndex, rng: np.random.Generator) -> np.ndarray:
    """Output of a wind farm as a fraction of its capacity, (K,), slowly varying in [0, 1]."""
    slow = _wander(rng, len(index), 1, 1.2, 360.0)[:, 0]
    fast = _wander(rng, len(index), 1, 0.25, 8.0)[:, 0]
    return 1.0 / (1.0 + np.exp(-(slow + fast)))


def make_operating_series(
    case: GridCase,
    index: pd.DatetimeIndex,
    timezone: str,
    rng: np.random.Generator,
    *,
    outages: list[PlannedOutage] = (),
    mix: np.ndarray | None = None,
    wind_mw: dict[str, float] | None = None,
    load_noise: float = 0.02,
) -> OperatingSeries:
    """Loads and generation of every snapshot of ``index`` (tz-aware) for ``case``.

    Base-case loads are taken as the peak; ``mix`` (n_bus, 3) fixes archetype weights per bus
    (random otherwise). ``wind_mw`` maps bus → capacity of variable generation at PQ buses;
    its output replaces the base-case generation there, which only sizes the meters.
    """
    net = case.network
    k, n = len(index), net.n_bus
    shape = load_profiles(index, timezone, n, rng, mix=mix, noise=load_noise)
    base_p = case.load_mw.to_numpy(float)
    base_q = case.load_mvar.to_numpy(float)
    load_mw = shape * base_p[None, :]
    load_mvar = shape * base_q[None, :]

    gen_p = case.gen_mw.to_numpy(float)
    gen_q = case.gen_mvar.to_numpy(float)
    variable = np.zeros((k, n))
    for bus, cap in (wind_mw or {}).items():
        pos = net.bus_positions([bus])[0]
        variable[:, pos] = cap * wind_profile(index, rng)
    slack = net.reference_position
    dispatch = (gen_p > 0) & ~variable.any(axis=0)
    dispatch[slack] = False
    total = load_mw.sum(axis=1) - variable.sum(axis=1)
    base_total = base_p.sum() - gen_p[variable.any(axis=0)].sum()
    ratio = total / base_total if base_total > 0 else np.ones(k)
    gen_mw = np.where(dispatch[None, :], gen_p[None, :] * ratio[:, None], 0.0)
    gen_mw += _wander(rng, k, n, 0.01, 15.0) * (gen_p * dispatch)[None, :]
    gen_mw = np.where(variable.any(axis=0)[None, :], variable, gen_mw)
    gen_mw[:, slack] = gen_p[slack] * ratio  # only a start value: the power flow sets it
    gen_mvar = np.where(dispatch[None, :], gen_q[None, :] * ratio[:, None], gen_q[None, :])

    status = np.broadcast_to(net.default_in_service(), (k, net.n_branch)).copy()
    for out in outages:
        pos = net.branch_positions([out.branch])[0]
        status[(index >= out.start) & (index < out.end), pos] = False
    return OperatingSeries(
        index, load_mw, load_mvar, gen_mw, gen_mvar, case.v_set.to_numpy(float),
        case.pv.to_numpy(bool), status, list(outages),
    )


def choose_planned_outage(
    case: GridCase,
    index: pd.DatetimeIndex,
    timezone: str,
    rng: np.random.Generator,
    *,
    candidates=None,
    hours: float = 6.0,
) -> PlannedOutage | None:
    """A line whose outage keeps the grid in one piece, on a weekday morning (local time).

    ``candidates`` restricts the choice (e.g. to branches with a status point). Returns None
    when no line qualifies or the period holds no weekday.
    """
    net = case.network
    base_status = net.default_in_service()
    n_islands = len(np.unique(net.islands(base_status)))
    lines = net.branches.index[(net.branches["kind"] == "line").to_numpy() & base_status]
    if candidates is not None:
        lines = lines[lines.isin(list(candidates))]
    order = rng.permutation(len(lines))
    local = index.tz_convert(timezone)
    start = None
    for first, last in ((1, 3), (0, 4)):  # midweek if the period has it, else any weekday
        days = sorted({d for d, w in zip(local.normalize(), local.day_of_week, strict=True)
                       if first <= w <= last})
        fits = [d for d in days if d + pd.Timedelta(hours=8 + hours) <= local[-1]]
        if fits:
            start = (fits[int(rng.integers(len(fits)))] + pd.Timedelta(hours=8)).tz_convert("UTC")
            break
    if start is None:
        return None
    end = start + pd.Timedelta(hours=hours)
    for i in order:
        status = base_status.copy()
        status[net.branch_positions([lines[i]])[0]] = False
        if len(np.unique(net.islands(status))) != n_islands:
            continue
        if case.solve(status).converged:
            return PlannedOutage(str(lines[i]), start, end)
    return None
