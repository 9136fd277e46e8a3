"""Week evidence: every point's measured values against what the rest of the network implies.

Several bad meters contaminate each other's residuals, so the evidence is built in rounds
(a week-long form of largest-normalized-residual identification, after Handschin et al., IEEE
Trans. PAS-94(2), 1975, applied to statistics over many snapshots):

1. Screening rounds on a subsample of the period (every ``screening_step``-th snapshot):
   estimate, take each point's ``screening_quantile`` of normalized residuals over the
   snapshots; points above the threshold are suspects. Which of them to set aside is decided
   by elimination on a few probe snapshots (:func:`~calibra.diagnosis.suspects.pick_suspects`):
   the unit whose removal lowers the objective most goes; suspects whose excess the units set
   aside can explain (a bad meter inflates its neighbours' residuals) wait for the next round.
   Repeat until no suspect remains. A point is never set aside if that would leave a bus
   estimated now without an estimate, or split the estimated part into more islands.
2. A full-resolution estimate without the set-aside points. The implied value of a point in
   the estimate is z − r/S (the value the other measurements imply: b̂ = r/S is the estimated
   error); for a point set aside it is h(x̂), an estimate made without it.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import partial

import numpy as np
import pandas as pd

from calibra.diagnosis.suspects import (
    PROBE_TOLERANCE,
    ScreeningRound,
    SuspectSettings,
    pick_suspects,
)
from calibra.estimation.engine import LocalEngine, PeriodEngine
from calibra.estimation.measurement_model import MeasurementModel
from calibra.estimation.period import PreparedPeriod
from calibra.estimation.probes import ProbeSet
from calibra.estimation.residuals import CRITICAL_S, ResidualAnalysis, analyse_residuals
from calibra.estimation.topology import StatusConflict
from calibra.estimation.week import PeriodResult, SolverSettings
from calibra.estimation.wls import Estimator, SnapshotEstimate
from calibra.model.points import CT_QUANTITIES, POWER_QUANTITIES
from calibra.model.site import Site
from calibra.progress import Progress


@dataclass
class EvidenceSettings:
    confidence: float = 0.99  #: chi-square test level
    normalized_threshold: float = 3.0  #: common practice (value from memory)
    screening_quantile: float = 0.8  #: "consistently" = in at least 20 % of snapshots
    screening_step: int = 10
    max_rounds: int = 12
    max_block: int = 360
    min_sensitivity: float = 0.02  #: below this S the implied value is too uncertain to use
    probe_snapshots: int = 8  #: snapshots re-estimated to test which suspect to set aside
    #: Convergence tolerance of the screening estimates (normalized residuals need far less
    #: than the final estimate's 1e-8).
    screening_tolerance: float = 1e-6


@dataclass
class Representative:
    """A fully analysed snapshot with the final set of points, for per-point redundancy."""

    estimate: SnapshotEstimate
    sensitivity: np.ndarray  # Sᵢᵢ per point (NaN for points not used)
    critical: np.ndarray
    sigma_implied: np.ndarray  # σ of the implied value per point, in the point's unit
    position: int
    analysis: ResidualAnalysis | None = field(repr=False, default=None)

    @property
    def covariance(self) -> np.ndarray:
        """The state covariance P of the representative estimate."""
        return self.analysis.state_covariance if self.analysis is not None else np.zeros((0, 0))


@dataclass
class WeekEvidence:
    """Per-point evidence over the period (arrays k × m float32, values in the points' units)."""

    index: pd.DatetimeIndex
    model: MeasurementModel
    measured: np.ndarray
    implied: np.ndarray
    normalized: np.ndarray
    set_aside: np.ndarray  # bool per point
    period: PeriodResult
    in_service: np.ndarray
    representative: Representative | None
    rounds: list[dict] = field(default_factory=list)
    status_conflicts: list[StatusConflict] = field(default_factory=list)

    @property
    def tags(self) -> pd.Index:
        return self.model.tags


def _normalized(period: PeriodResult) -> np.ndarray:
    """|r|/√Ω; NaN where Ω is zero (a critical measurement has no normalized residual)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        rn = np.abs(period.residual) / np.sqrt(period.omega)
    rn[~np.isfinite(rn)] = np.nan
    return rn


def _quantile_over_snapshots(x: np.ndarray, q: float, min_count: int = 20) -> np.ndarray:
    count = np.isfinite(x).sum(axis=0)
    out = np.full(x.shape[1], np.nan)
    ok = count >= min_count
    if ok.any():
        out[ok] = np.nanquantile(x[:, ok], q, axis=0)
    return out


def _representative(estimator: Estimator, z: np.ndarray, in_service: np.ndarray,
                    set_aside: np.ndarray, confidence: float) -> Representative | None:
    """The most complete snapshot, estimated and analysed exactly without the set-aside points."""
    avail = np.isfinite(z) & ~set_aside[None, :]
    order = np.argsort(-avail.sum(axis=1), kind="stable")
    model = estimator.model
    for pos in order[:10]:
        zz = np.where(set_aside, np.nan, z[pos])
        est = estimator.estimate(zz, None, in_service[pos])
        if not est.converged:
            continue
        a = analyse_residuals(estimator, est, confidence)
        sig_y = np.full(model.m, np.nan)
        used = est.used
        s = a.sensitivity_diag
        with np.errstate(divide="ignore", invalid="ignore"):
            sig_y[used] = model.sigma_pu[used] * np.sqrt(np.maximum(1 - s[used], 0) / s[used])
        # Points not used: σ of h(x̂) from the state covariance.
        others = np.flatnonzero(~used)
        if others.size and a.state_covariance.size:
            H = model.functions.jacobian(est.vm, est.va, est.layout, est.in_service)[others]
            H = H.toarray()
            var = np.sum((H @ a.state_covariance) * H, axis=1)
            sig_y[others] = np.sqrt(np.maximum(var, 0.0))
        return Representative(est, s, a.critical, sig_y / model.to_pu, int(pos), a)
    return None


class _Stage:
    """Relays a stage's progress with the stage's name (and its cancel check)."""

    def __init__(self, progress: Progress | None, name: str):
        self.progress, self.name = progress, name

    def update(self, done: int, total: int, message: str = "") -> None:
        if self.progress is not None:
            self.progress.update(done, total, self.name)

    @property
    def cancelled(self) -> bool:
        return self.progress is not None and self.progress.cancelled

    def cancel(self) -> None:
        if self.progress is not None:
            self.progress.cancel()


def _device_index(site: Site, model: MeasurementModel) -> tuple[np.ndarray, np.ndarray]:
    """Device number of each point fed by a CT with others — power flows and injections and
    current magnitudes (−1 for other quantities) — and which points are power channels."""
    pts = site.points.loc[model.tags]
    power = pts["quantity"].isin(POWER_QUANTITIES).to_numpy()
    fed = pts["quantity"].isin(CT_QUANTITIES).to_numpy()
    codes, _ = pd.factorize(pts["device"].astype(str))
    return np.where(fed, codes, -1), power


def screening_sample(z: np.ndarray, in_service: np.ndarray, step: int) -> np.ndarray:
    """Every ``step``-th snapshot, ordered by topology and then by loading (the mean |value|
    of the points, per unit): the screening estimates them in blocks that cross days, and
    a block of similar operating points converges around one reference."""
    sub = np.arange(0, z.shape[0], max(1, step))
    if sub.size == 0:
        return sub
    a = np.abs(z[sub])
    seen = np.isfinite(a)
    level = np.where(seen, a, 0.0).sum(axis=1) / np.maximum(seen.sum(axis=1), 1)
    state = in_service[sub]
    rows = np.packbits(state, axis=1) if state.dtype == bool else state
    _, topology = np.unique(rows, axis=0, return_inverse=True)
    return sub[np.lexsort((sub, level, topology.ravel()))]


def gather_evidence(
    period: PreparedPeriod,
    settings: EvidenceSettings | None = None,
    progress: Progress | None = None,
    *,
    initial_set_aside: np.ndarray | None = None,
    screen: bool = True,
    engine: PeriodEngine | None = None,
) -> WeekEvidence:
    """Build the week evidence for every analog point of the period's site.

    ``period`` holds the values to review, already corrected for any software corrections in
    force (:func:`calibra.review_period.select_period`). ``initial_set_aside`` marks points to
    leave out from the start; ``screen=False`` skips the screening rounds. ``engine`` estimates
    the period (default: :class:`~calibra.estimation.engine.LocalEngine` on this machine).
    """
    st = settings or EvidenceSettings()
    site, model, estimator = period.site, period.model, period.estimator
    z, in_service = period.z, period.in_service
    k, m = z.shape
    base = np.isfinite(z).any(axis=0)
    set_aside = np.zeros(m, bool) if initial_set_aside is None else initial_set_aside.copy()
    rounds: list[dict] = []
    step = max(1, st.screening_step)
    sub = screening_sample(z, in_service, step)
    z_sub, ins_sub = z[sub], in_service[sub]
    engine = engine or LocalEngine()
    screening = SolverSettings(max(60, st.max_block // step), st.screening_tolerance,
                               st.confidence)
    probe = np.unique(np.linspace(0, len(sub) - 1, min(st.probe_snapshots, len(sub))).astype(int))
    device_of, power = _device_index(site, model)
    for rnd in range(st.max_rounds if screen else 0):
        if progress is not None:
            progress.update(rnd, st.max_rounds + 2, f"screening round {rnd + 1}")
        screened = engine.estimate(period, sub, set_aside, settings=screening,
                                   progress=_Stage(progress, f"screening round {rnd + 1}"),
                                   by_day=False)
        stat = _quantile_over_snapshots(_normalized(screened), st.screening_quantile)
        cand = np.flatnonzero((stat > st.normalized_threshold) & ~set_aside)
        rounds.append({
            "round": rnd + 1, "snapshots": len(sub),
            "chi2_failed": int((~screened.outcomes["chi2_passed"].astype(bool)).sum()),
            "suspects": int(cand.size),
        })
        if cand.size == 0:
            break
        starts = [(screened.vm[j].astype(float), screened.va[j].astype(float)) for j in probe]
        probes = ProbeSet(estimator, z_sub[probe], ins_sub[probe], set_aside, starts,
                          PROBE_TOLERANCE)
        # Residual correlations at the first probe snapshot, normalized by the screening's
        # residual variances there.
        omega = screened.omega[probe[0]].astype(float)
        picked = pick_suspects(
            ScreeningRound(estimator, partial(probes.correlation, omega=omega), cand, stat,
                           base, set_aside, probes, ins_sub[probe], device_of, power),
            SuspectSettings(st.normalized_threshold))
        if not picked:
            break
        set_aside[picked] = True
        rounds[-1]["set_aside"] = [str(model.tags[i]) for i in picked]

    if progress is not None:
        progress.update(st.max_rounds, st.max_rounds + 2, "estimating the full period")
    full = engine.estimate(period, np.arange(k), set_aside,
                           settings=SolverSettings(st.max_block, 1e-8, st.confidence),
                           progress=_Stage(progress, "estimating the full period"))
    implied = _implied_values(model, z, full, set_aside, in_service, st.min_sensitivity)
    rep = _representative(estimator, z, in_service, set_aside, st.confidence)
    return WeekEvidence(
        index=period.index, model=model, measured=period.measured,
        implied=implied, normalized=_normalized(full).astype(np.float32),
        set_aside=set_aside, period=full, in_service=in_service, representative=rep,
        rounds=rounds, status_conflicts=period.status_conflicts,
    )


def _implied_values(model: MeasurementModel, z: np.ndarray, period: PeriodResult,
                    set_aside: np.ndarray, in_service: np.ndarray,
                    min_sensitivity: float) -> np.ndarray:
    """z − r/S for points in the estimate; h(x̂) for points set aside (in the points' units;
    NaN where the point depends on a bus the snapshot's estimate does not cover)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        s = period.omega / model.sigma_pu[None, :] ** 2
        implied = z - period.residual / s
    implied[~(s >= max(min_sensitivity, CRITICAL_S))] = np.nan
    cols = np.flatnonzero(set_aside)
    if cols.size:
        k = z.shape[0]
        sub = model.functions
        chunk = 2048
        for a in range(0, k, chunk):
            b = min(a + chunk, k)
            vm = period.vm[a:b].T.astype(float)
            va = period.va[a:b].T.astype(float)
            ok = np.isfinite(vm).any(axis=0)
            # One topology per call: group the chunk's snapshots by their branch status.
            # Buses a snapshot's estimate does not cover are NaN, and so is every value that
            # depends on them.
            stat = in_service[a:b]
            for row in {r.tobytes(): r for r in stat}.values():
                sel = np.flatnonzero(ok & np.all(stat == row, axis=1))
                if sel.size == 0:
                    continue
                h = sub.evaluate(vm[:, sel], va[:, sel], row)[cols]
                implied[a + sel[:, None], cols[None, :]] = h.T
    return (implied / model.to_pu[None, :]).astype(np.float32)
