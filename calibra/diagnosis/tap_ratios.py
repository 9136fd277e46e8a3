"""The tap ratio a transformer's meters imply, run by run over a period.

A run is a stretch of consecutive snapshots in which the tap is taken as constant: a constant
telemetered step, or a chunk of hours for a transformer without tap telemetry. In each run the
ratio is estimated jointly with the states of a few of its snapshots
(:func:`calibra.estimation.parameters.estimate_parameter`, the multi-snapshot parameter
estimate), from every point that reported in the run except those the week's evidence set
aside away from the transformer: the points around it are kept, since a wrong tap is what
makes them look wrong.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from calibra.diagnosis.evidence import WeekEvidence
from calibra.estimation.parameters import fit_terms, sample_from_states, spread_positions
from calibra.estimation.period import PreparedPeriod
from calibra.estimation.runtime import fork_map
from calibra.model.network import branch_status
from calibra.model.parameters import NetworkParameter, ParameterKind, model_value
from calibra.model.tap_changers import TappedSide, tap_changers
from calibra.progress import Progress

#: Convergence of a run's joint fit (relative change of the ratio and largest state step).
FIT_TOLERANCE = 1e-7


@dataclass(frozen=True)
class RatioRun:
    """The implied ratio of the tapped side over snapshots ``start``..``end``−1 of a period."""

    start: int
    end: int
    step: float  # the telemetered step there (NaN: none)
    ratio: float  # implied ratio of the tapped side
    std: float  # its standard deviation (joint-fit covariance)
    snapshots: int  # snapshots of the joint fit
    drop: float = 0.0  # how much the fitted ratio lowers the snapshots' WLS objective


def constant_runs(values: np.ndarray, index: pd.DatetimeIndex, max_hours: float,
                  min_length: int) -> list[tuple[int, int]]:
    """Runs of equal finite ``values`` (NaN belongs to no run), cut at UTC days and after
    ``max_hours``, each at least ``min_length`` snapshots long."""
    k = len(values)
    if k == 0:
        return []
    v = np.where(np.isfinite(values), values, np.nan)
    change = np.r_[True, ~((v[1:] == v[:-1]) | (np.isnan(v[1:]) & np.isnan(v[:-1])))]
    day = index.normalize().asi8
    change |= np.r_[True, day[1:] != day[:-1]]
    starts = np.flatnonzero(change)
    ends = np.r_[starts[1:], k]
    span = pd.Timedelta(hours=max_hours).value
    stamps = index.asi8
    runs = []
    for a, b in zip(starts, ends, strict=True):
        if np.isnan(v[a]):
            continue
        s = int(a)
        while s < b:
            e = max(int(np.searchsorted(stamps[s:b], stamps[s] + span, side="left")) + s, s + 1)
            if e - s >= min_length:
                runs.append((s, e))
            s = e
    return runs


def neighbour_rows(ev: WeekEvidence, branch: str) -> np.ndarray:
    """Rows of the measurement model whose value depends on either bus of ``branch``."""
    model = ev.model
    funcs = model.functions
    pos = int(model.network.branch_positions([branch])[0])
    adm = model.network.branch_admittances(np.ones(model.network.n_branch, bool))
    ends = {int(adm.f[pos]), int(adm.t[pos])}
    return np.array([i for i in range(model.m) if ends & set(funcs.buses_of(i).tolist())],
                    np.int64)


def implied_ratios(period: PreparedPeriod, ev: WeekEvidence, branch: str,
                   runs: list[tuple[int, int]], steps: np.ndarray | None = None,
                   per_run: int = 4, progress: Progress | None = None,
                   keep: np.ndarray | None = None) -> list[RatioRun]:
    """The implied ratio of ``branch``'s tapped side in each run (runs whose fit fails or
    whose state is missing are left out). ``steps``: the telemetered step per snapshot;
    ``keep``: further rows to use although set aside (so that the fits of several branches
    use one measurement set and their objectives compare)."""
    net = period.site.network
    b = int(net.branch_positions([branch])[0])
    available = ~ev.set_aside
    available[neighbour_rows(ev, branch)] = True
    if keep is not None:
        available[keep] = True
    state = period.in_service.astype(float)
    on = branch_status(period.in_service)[:, b]
    state[:, b] = np.where(on, 1.0, 0.0)
    parameter = NetworkParameter(branch, ParameterKind.TAP)
    t_model = model_value(net, parameter)
    changers = tap_changers(net)
    on_to = branch in changers.index and changers.at[branch, "tap_side"] == TappedSide.TO
    def one(run: tuple[int, int]) -> RatioRun | None:
        a, c = run
        rows = np.arange(a, c)[on[a:c]]
        if rows.size == 0:
            return None
        pick = rows[spread_positions(rows.size, per_run)]
        fit = _fit(period, ev, state, pick, available, parameter, t_model)
        if fit is None:
            return None
        t, sd, n, drop = fit
        ratio, std = t, sd
        if on_to:
            # The ideal ratio:1 at the to bus acts, to first order, as t_model/ratio on the
            # from side; the series impedance then sits on the other side of it, so the fit
            # is repeated with that ratio in place and the small from-side rest folded in.
            ratio, std = t_model / t, t_model * sd / t ** 2
            again = state.copy()
            again[pick, b] = np.where(on[pick], ratio, 0.0)
            fit = _fit(period, ev, again, pick, available, parameter, t_model)
            if fit is None:
                return None
            rest, sd, n, drop = fit[0], fit[1], fit[2], drop + fit[3]
            ratio, std = ratio * t_model / rest, ratio * t_model * sd / rest ** 2
        step = float(steps[a]) if steps is not None else float("nan")
        return RatioRun(a, c, step, float(ratio), float(std), n, float(drop))

    if progress is not None:
        progress.update(0, 1, f"tap ratio of {branch} in {len(runs)} runs")
    # Runs are independent: fitted on the worker processes where possible.
    return [r for r in fork_map(one, runs) if r is not None]


def _fit(period: PreparedPeriod, ev: WeekEvidence, state: np.ndarray, pick: np.ndarray,
         available: np.ndarray, parameter: NetworkParameter, start: float
         ) -> tuple[float, float, int, float] | None:
    """The from-side ratio of ``parameter``'s branch jointly with the states of the snapshots
    ``pick`` (value, σ, snapshots, objective drop), None when the fit fails. A ratio to 1e-7
    is far finer than a step (0.6-1.3 %)."""
    sample = sample_from_states(period.estimator, period.z, state, ev.period.vm, ev.period.va,
                                pick, available)
    if len(sample) == 0:
        return None
    fit = fit_terms(period.estimator, sample, [parameter], np.array([start]),
                    tolerance=FIT_TOLERANCE, max_iterations=15)
    value, var = float(fit.values[0]), float(fit.covariance[0, 0])
    if not fit.converged or not np.isfinite(value) or not np.isfinite(var) or value <= 0:
        return None
    return (value, float(np.sqrt(max(var, 0.0))), fit.snapshots,
            float(fit.objective_before - fit.objective_after))
