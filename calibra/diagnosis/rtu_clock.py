"""RTU clocks: all points of one RTU stamped a constant time late (or early).

An RTU whose clock is wrong, or that stamps its values on receipt, makes every one of its
points disagree with the network while the values change (load ramps) and agree while they
are steady. Per RTU with enough points, the shift of its readings against their implied values
is fitted jointly over its points (:mod:`calibra.diagnosis.clock_fit`):

1. **Screening** on the review's evidence, for every RTU: the fitted shift must be at least
   ``screen_steps`` intervals, inside the searched range, and significant (chunk t ≥
   ``screen_t`` of the gain or of the tilt toward it) jointly or for at least
   ``min_supporting`` points on their own.
2. **Confirmation** for the strongest candidates: the implied values of a point in the
   estimate are partly its own reading (z − r/S), and the RTU's points lag together, so they
   are estimated again with every candidate's points set aside (h(x̂) from the other meters
   only; a lagging RTU would also make its neighbour seem to lag; a candidate left unchecked
   that way is estimated again with only its own points set aside). The
   shift must then be significant (t ≥ ``significance``), several standard errors from zero,
   supported by at least ``min_supporting`` points, and still significant without the point
   that gains most (``agreement_t``: one meter with a drift or a fault is not a clock).

Points whose own week the classification finds reversed, scaled or frozen are left out of the
fit (their errors are their own). A confirmed RTU's readings are then moved back by the offset
(:func:`clock_corrected_period`) and the review judges its points again, so a real meter fault
on one of them is still found and the lag itself blames no meter.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from calibra.diagnosis.clock_fit import ShiftFit, fit_shift, regular_shifts, shift_back
from calibra.diagnosis.evidence import EvidenceSettings, WeekEvidence, gather_evidence
from calibra.diagnosis.findings import DiagnosisKind, Finding, FindingKind
from calibra.estimation.engine import PeriodEngine
from calibra.estimation.period import PreparedPeriod
from calibra.progress import Progress

#: Diagnoses whose own error would dominate a point's misfit: left out of the clock fit.
_OWN_FAULT = (DiagnosisKind.REVERSED, DiagnosisKind.SCALE, DiagnosisKind.STUCK,
              DiagnosisKind.INSUFFICIENT)


@dataclass
class ClockSettings:
    """Thresholds of the RTU clock test (common practice, no source, unless noted)."""

    enabled: bool = True
    min_points: int = 3  #: analog points an RTU needs to be tested
    min_supporting: int = 2  #: points whose own chunk t statistic supports the shift
    max_shift_minutes: float = 30.0  #: the searched range, either way
    max_shift_steps: int = 60  #: at most this many snapshot intervals either way
    screen_t: float = 3.0  #: screening: chunk t statistic
    #: screening: the least shift, in intervals (the RTU's own readings in its points' implied
    #: values pull the shift toward zero, so less than the half interval a finding needs)
    screen_steps: float = 0.25
    significance: float = 4.0  #: confirmation: chunk t statistic and |offset| / stderr
    agreement_t: float = 3.0  #: confirmation: chunk t without the point that gains most
    point_t: float = 2.0  #: a point supports the shift above this, contradicts below −this
    max_candidates: int = 3  #: RTUs confirmed by a second estimate at most
    chunks: int = 24  #: time chunks for the t statistics and the jackknife
    min_snapshots: int = 120  #: a point needs this many snapshots with both values


@dataclass
class RtuClock:
    """A confirmed clock error of one RTU."""

    rtu: str
    offset_s: float  #: late positive
    stderr_s: float
    interval_s: float
    confidence: float
    tags: tuple[str, ...]  #: the RTU's points used in the fit
    supporting: tuple[str, ...]  #: those whose own data support the offset
    substation: str
    t_stat: float
    snapshots: int
    details: dict = field(default_factory=dict)


def interval_seconds(index: pd.DatetimeIndex) -> float:
    """The snapshot interval: the median step between snapshots, in seconds."""
    if len(index) < 2:
        return 60.0
    return float(np.median(np.diff(seconds_from_start(index))))


def seconds_from_start(index: pd.DatetimeIndex) -> np.ndarray:
    """Seconds of each snapshot after the first (whatever the index's time unit)."""
    return np.asarray((index - index[0]) / pd.Timedelta(seconds=1), float)


def _groups(rtu_of: np.ndarray, ev: WeekEvidence, diagnoses: dict, st: ClockSettings
            ) -> dict[str, np.ndarray]:
    """Each RTU's points fit for the clock test (columns of the evidence)."""
    out: dict[str, np.ndarray] = {}
    valid = (np.isfinite(ev.measured) & np.isfinite(ev.implied)).sum(axis=0)
    for rtu in sorted(set(rtu_of) - {""}):
        cols = [i for i in np.flatnonzero(rtu_of == rtu)
                if valid[i] >= st.min_snapshots
                and diagnoses[str(ev.model.tags[i])].kind not in _OWN_FAULT]
        if len(cols) >= st.min_points:
            out[rtu] = np.asarray(cols)
    return out


def rtu_of_points(period: PreparedPeriod) -> np.ndarray:
    """The RTU of each of the period's points ("" where the point list names none)."""
    pts = period.site.points.loc[period.model.tags]
    if "rtu" not in pts:
        return np.full(len(pts), "", dtype=object)
    return pts["rtu"].fillna("").astype(str).to_numpy()


def _noise(ev: WeekEvidence, cols: np.ndarray) -> np.ndarray:
    """Each point's expected scatter of z − y: the meter's σ and the implied value's."""
    model = ev.model
    sigma = model.sigma_pu[cols] / model.to_pu[cols]
    sig_y = np.zeros(cols.size)
    if ev.representative is not None:
        s = ev.representative.sigma_implied[cols]
        sig_y = np.where(np.isfinite(s), s, 0.0)
    return np.sqrt(sigma ** 2 + sig_y ** 2)


@dataclass(frozen=True)
class _ShiftGrid:
    """The searched shifts of a period: its interval, the range and which shifts are regular."""

    interval_s: float
    steps: int
    regular: np.ndarray

    @classmethod
    def of(cls, index: pd.DatetimeIndex, st: ClockSettings) -> _ShiftGrid:
        interval = interval_seconds(index)
        steps = int(np.clip(round(st.max_shift_minutes * 60.0 / interval), 2,
                            st.max_shift_steps))
        return cls(interval, steps, regular_shifts(seconds_from_start(index), interval, steps))


def _fit(ev: WeekEvidence, cols: np.ndarray, st: ClockSettings, grid: _ShiftGrid) -> ShiftFit:
    return fit_shift(ev.measured[:, cols].astype(float), ev.implied[:, cols].astype(float),
                     _noise(ev, cols), grid.regular, grid.steps, st.chunks)


def _supporting(fit: ShiftFit, st: ClockSettings) -> tuple[np.ndarray, int]:
    support = fit.point_t > st.point_t
    return support, int((fit.point_t < -st.point_t).sum())


def _passes_screen(fit: ShiftFit, st: ClockSettings) -> bool:
    """Worth a second estimate: the shift is significant jointly, or on its own for at least
    ``min_supporting`` points. Points whose implied values come mostly from the RTU's own
    (lagging) readings agree with a shift of zero, so the joint test alone can miss it."""
    if fit.at_edge or abs(fit.steps) < st.screen_steps:
        return False
    points = np.maximum(fit.point_t, fit.point_tilt_t)
    strong = int((points >= st.screen_t).sum())
    return max(fit.t_stat, fit.tilt_t) >= st.screen_t or strong >= st.min_supporting


def _confirmed(fit: ShiftFit, st: ClockSettings) -> bool:
    support, against = _supporting(fit, st)
    return (fit.whole_steps != 0 and not fit.at_edge and fit.t_stat >= st.significance
            and abs(fit.steps) >= st.significance * fit.stderr
            and fit.t_without_largest >= st.agreement_t
            and support.sum() >= st.min_supporting and support.sum() >= 3 * against)


def find_rtu_clocks(period: PreparedPeriod, ev: WeekEvidence, diagnoses: dict,
                    settings: ClockSettings | None = None,
                    evidence_settings: EvidenceSettings | None = None,
                    progress: Progress | None = None,
                    engine: PeriodEngine | None = None) -> list[RtuClock]:
    """RTUs whose points lag (or lead) the rest by one constant time (module docstring)."""
    st = settings or ClockSettings()
    if not st.enabled or len(ev.index) < 4 * st.chunks:
        return []
    rtu_of = rtu_of_points(period)
    groups = _groups(rtu_of, ev, diagnoses, st)
    grid = _ShiftGrid.of(ev.index, st)  # the evidence estimated again has the same index
    screened = []
    for rtu, cols in groups.items():
        fit = _fit(ev, cols, st, grid)
        if _passes_screen(fit, st):
            screened.append((max(fit.t_stat, fit.tilt_t), rtu))
    candidates = [rtu for _, rtu in sorted(screened, reverse=True)[:st.max_candidates]]
    if not candidates:
        return []

    def without(rtus: list[str]) -> WeekEvidence:
        aside = ev.set_aside | np.isin(rtu_of, rtus)
        return gather_evidence(period, evidence_settings, progress, initial_set_aside=aside,
                               screen=False, engine=engine)

    # Every candidate's points set aside at once: a lagging RTU's readings shift its
    # neighbours' implied values too, and a neighbour judged against them would seem to lag.
    together = without(candidates)
    clocks = []
    for rtu in candidates:
        if progress is not None and progress.cancelled:
            break
        evidence = together
        cols = _checked(evidence, groups[rtu], st)
        if cols.size < st.min_points and len(candidates) > 1:
            # Setting the other candidates aside too left this RTU's points unchecked.
            evidence = without([rtu])
            cols = _checked(evidence, groups[rtu], st)
        if cols.size < st.min_points:
            continue
        fit = _fit(evidence, cols, st, grid)
        if _confirmed(fit, st):
            clocks.append(_clock(period, evidence, rtu, cols, fit, grid.interval_s, st))
    return clocks


def _checked(ev: WeekEvidence, cols: np.ndarray, st: ClockSettings) -> np.ndarray:
    """The columns with enough implied values (the other meters still check them)."""
    return np.array([i for i in cols if np.isfinite(ev.implied[:, i]).sum() >= st.min_snapshots],
                    dtype=int)


def _clock(period: PreparedPeriod, ev: WeekEvidence, rtu: str, cols: np.ndarray,
           fit: ShiftFit, interval: float, st: ClockSettings) -> RtuClock:
    tags = tuple(str(ev.model.tags[i]) for i in cols)
    support, _ = _supporting(fit, st)
    subs = period.site.points.loc[list(tags), "substation"].astype(str)
    return RtuClock(
        rtu=rtu, offset_s=fit.steps * interval, stderr_s=fit.stderr * interval,
        interval_s=interval, confidence=round(fit.share_chunks, 3), tags=tags,
        supporting=tuple(t for t, s in zip(tags, support, strict=True) if s),
        substation=str(subs.mode().iloc[0]) if len(subs) else "", t_stat=fit.t_stat,
        snapshots=int(np.isfinite(ev.measured[:, cols]).any(axis=1).sum()),
        details={"whole_steps": fit.whole_steps, "t_without_largest": fit.t_without_largest},
    )


def clock_corrected_period(period: PreparedPeriod, clocks: list[RtuClock]) -> PreparedPeriod:
    """The period with each clock RTU's analog readings moved back by its offset (the value at
    t is the one stamped t + offset), as the review judges its points again."""
    if not clocks:
        return period
    measured, z = period.measured.copy(), period.z.copy()
    times = seconds_from_start(period.index)
    rtu_of = rtu_of_points(period)
    for c in clocks:
        cols = np.flatnonzero(rtu_of == c.rtu)
        measured[:, cols] = shift_back(measured[:, cols].astype(float), times, c.offset_s,
                                       c.interval_s).astype(np.float32)
        z[:, cols] = shift_back(z[:, cols], times, c.offset_s, c.interval_s)
    return replace(period, measured=measured, z=z)


def _seconds(x: float) -> str:
    minutes = abs(x) / 60.0
    return f"{abs(x):,.0f} s ({minutes:.1f} min)"


def clock_findings(clocks: list[RtuClock]) -> list[Finding]:
    """One ``time_offset`` finding per RTU (tag and rtu: the RTU; offset in seconds)."""
    out = []
    for c in clocks:
        way = "late" if c.offset_s > 0 else "early"
        spread = f"{c.stderr_s:,.1f}" if c.stderr_s < 10 else f"{c.stderr_s:,.0f}"
        evidence = (f"{c.rtu}'s points read the network's values {_seconds(c.offset_s)} "
                    f"{way} (± {spread} s; snapshots every {c.interval_s:,.0f} s): "
                    f"{len(c.supporting)} of the {len(c.tags)} the other meters check "
                    f"support it on their own, the shift fits better in "
                    f"{100 * c.confidence:.0f} % of the period's time chunks; the RTU's "
                    f"points were judged with their readings moved back by the offset")
        out.append(Finding(
            tag=c.rtu, device="", substation=c.substation, finding=FindingKind.TIME_OFFSET,
            confidence=c.confidence, evidence=evidence, offset=round(c.offset_s, 1),
            scope="rtu", element=c.rtu, unit="s", rtu=c.rtu,
            cause="RTU clock error, or values time-stamped on receipt",
            action=("check the RTU's time synchronisation (clock source, time zone, "
                    "daylight-saving setting) and whether it stamps values at the source"),
            snapshots_used=c.snapshots, share_supporting=c.confidence,
            details={"offset_stderr_s": c.stderr_s, "points": list(c.tags),
                     "supporting": list(c.supporting), "interval_s": c.interval_s,
                     "t_stat": c.t_stat},
        ))
    return out
