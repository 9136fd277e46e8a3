"""Classify one point's week: healthy, or which fault model explains it, with parameters.

The decision rules (all documented in DEVELOPERS.md):

1. Too few snapshots with both a measured and an implied value → "insufficient data".
2. Runs of frozen values while the implied value moves → stuck (those snapshots are then left
   out of the other fits).
3. Fit gain (z = k·y; only where the implied values vary beyond their own noise), offset
   (z = y + c) and drift (z = y + a·(t − t₀)⁺). A model is a candidate when it explains the
   data clearly better than "healthy" where the two differ (median error at most half the
   healthy one there) and its systematic error is beyond the accuracy class limit at the
   point's typical reading and statistically significant. The candidate with the lowest mean
   error wins; simpler models win near-ties (scale, offset, then drift).
4. Otherwise, a scatter well beyond the expected noise (meter class, the implied value's
   own uncertainty and the reading's deadband) → noisy.

A point stored by exception lags the true value by up to its deadband, and a reading on a
coarse grid (converter or historian) is off by up to half its resolution: both enter the
expected noise (deadband/√3, resolution/√12) and the limit a systematic error must pass (class
limit + deadband + resolution/2), and a frozen run counts only while the implied value moves by
more than that limit and another deadband. Both are the point list's stated values, or read
from the series where it leaves them empty (:mod:`calibra.model.reporting`).

Confidence is the share of snapshots, among those where the chosen model and "healthy" predict
clearly different values, in which the chosen model is the closer one.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from calibra.diagnosis.findings import DiagnosisKind
from calibra.diagnosis.fits import find_stuck_runs, fit_drift, fit_gain, robust_scale


@dataclass
class ClassifySettings:
    """Thresholds of the per-point classification (see module docstring)."""

    min_snapshots: int = 120  #: fewer valid snapshots → insufficient data
    improvement: float = 2.0  #: healthy median error / model median error at least this
    significance: float = 4.0  #: parameter / standard error at least this
    noisy_factor: float = 3.0  #: scatter / expected scatter above this → noisy
    stuck_minutes: int = 60  #: shortest frozen run counted as stuck (snapshots)
    class_margin: float = 1.0  #: systematic error must exceed class limit × this
    #: a gain is fitted only when the implied values' RMS beyond their own noise is at least
    #: this many σ_implied (errors in variables: below it the fitted gain mostly measures the
    #: implied value's noise; at 3 the fit is shrunk by at most 10 %; common practice, no source)
    gain_signal: float = 3.0


@dataclass
class PointSeries:
    """A point's week: times in days from the period start, measured and implied values in
    the point's unit, and its accuracy (σ and the class limit = accuracy % × full scale)."""

    t_days: np.ndarray
    z: np.ndarray
    y: np.ndarray
    sigma: float
    class_limit: float
    sigma_implied: float = 0.0
    #: The step of the stored readings (converter or historian), in the point's unit: a
    #: healthy reading is off by up to half of it (see
    #: :func:`calibra.model.reporting.reading_resolution`).
    resolution: float = 0.0
    #: The change a reading must make before it is stored again (report by exception, or the
    #: converter's step), in the point's unit: a healthy reading may lag the true value by up
    #: to this much (see :func:`calibra.model.reporting.reporting_deadband`).
    deadband: float = 0.0
    #: Which of ``deadband`` and ``resolution`` the point list states (the others were read
    #: from the series): the evidence says which.
    stated: tuple[str, ...] = ()
    #: Whether a gain is one a known cause explains (CT taps, √3, units); decides near-ties
    #: between a scale and an offset, which a nearly constant reading cannot tell apart.
    known_factor: Callable[[float], bool] | None = None


@dataclass
class PointDiagnosis:
    kind: DiagnosisKind
    confidence: float = 0.0
    params: dict = field(default_factory=dict)
    n_used: int = 0
    loss_healthy: float = float("nan")
    loss_model: float = float("nan")
    reason: str = ""


def _improves(e_model: np.ndarray, e_healthy: np.ndarray, noise: float, ratio: float,
              min_count: int) -> bool:
    """Where the model and "healthy" differ by more than the noise (at least ``min_count``
    snapshots), the healthy median error is at least ``ratio`` × the model's. Judging only
    there lets a fault that lasts part of the period (a drift from Friday) count fully."""
    differ = np.abs(e_model - e_healthy) > noise
    if differ.sum() < min_count:
        return False
    return bool(np.median(np.abs(e_healthy[differ]))
                >= ratio * np.median(np.abs(e_model[differ])))


def _confidence(e_model: np.ndarray, e_healthy: np.ndarray, noise: float) -> float:
    differ = np.abs(np.abs(e_model) - np.abs(e_healthy)) > noise
    if not differ.any():
        return 0.0
    return float((np.abs(e_model[differ]) < np.abs(e_healthy[differ])).mean())


@dataclass
class _Week:
    """A point's valid snapshots and what every fault model is judged against."""

    ps: PointSeries
    st: ClassifySettings
    t: np.ndarray
    z: np.ndarray
    y: np.ndarray
    noise: float  # σ of z − y when healthy (meter and implied value)
    limit: float  # accuracy class limit × margin
    e0: np.ndarray = field(init=False)  # z − y
    loss0: float = field(init=False)  # its median |·|

    def __post_init__(self) -> None:
        self.e0 = self.z - self.y
        self.loss0 = float(np.median(np.abs(self.e0)))

    @property
    def n(self) -> int:
        return int(self.z.size)

    def better(self, e_m: np.ndarray) -> bool:
        """Whether a model's errors explain the data clearly better than "healthy"."""
        return _improves(e_m, self.e0, self.noise, self.st.improvement, self.st.stuck_minutes)

    def mean_loss(self, e_m: np.ndarray, gain: float = 1.0) -> float:
        """Mean |error| in units of the model's own noise: a gain k also scales the implied
        value's noise."""
        ps = self.ps
        return float(np.mean(np.abs(e_m))) / float(np.hypot(ps.sigma, gain * ps.sigma_implied))


def _storage(ps: PointSeries, noise: float) -> dict:
    """The deadband and resolution a finding was judged with, which were stated, and the
    expected scatter they entered."""
    return {"deadband": ps.deadband, "resolution": ps.resolution, "stated": ps.stated,
            "expected": noise}


#: A fault model that explains the week: (mean loss, order, kind, parameters, its errors).
Candidate = tuple[float, int, DiagnosisKind, dict, np.ndarray]


def _stuck(w: _Week) -> PointDiagnosis | None:
    """Frozen values while the implied value moves (runs of at least ``stuck_minutes``)."""
    ps, st, t, z, y, n = w.ps, w.st, w.t, w.z, w.y, w.n
    # Frozen means the very same stored value: a healthy reading on a coarse grid moves one
    # step at a time, and a tolerance of a step would join those steps into a "frozen" run.
    runs = find_stuck_runs(z, y, 1e-9 * max(1.0, np.abs(z).max()),
                           st.stuck_minutes, max(4 * w.noise, w.limit + ps.deadband))
    if not runs:
        return None
    frozen = np.zeros(n, bool)
    for r in runs:
        frozen[r.start:r.stop] = True
    e_f = z[frozen] - y[frozen]
    first, last = runs[0], runs[-1]
    if np.median(np.abs(e_f)) <= max(w.limit, 2 * w.noise):
        return None
    return PointDiagnosis(
        DiagnosisKind.STUCK, confidence=float((np.abs(e_f) > w.noise).mean()), n_used=n,
        params={"value": first.value, "onset_days": float(t[first.start]),
                "until_days": float(t[last.stop - 1]) if last.stop < n else None,
                "frozen_snapshots": int(frozen.sum()),
                "implied_min": float(y[frozen].min()),
                "implied_max": float(y[frozen].max()), **_storage(ps, w.noise)},
        loss_healthy=float(np.median(np.abs(e_f))), loss_model=0.0,
    )


def _gain(w: _Week) -> Candidate | None:
    """z = k·y (reversed when k < 0), sought only where the implied values carry a signal.

    With implied values y = y_true + ε, the fitted gain shrinks toward 0 by Σy_true²/Σy²: a
    metered bus without load reads 0 while its implied value scatters by σ_implied, and
    "scale 0.001" would fit that scatter."""
    ps, st, z, y = w.ps, w.st, w.z, w.y
    signal = np.sqrt(max(float(np.mean(y * y)) - ps.sigma_implied ** 2, 0.0))
    if signal < st.gain_signal * ps.sigma_implied:
        return None
    k = fit_gain(z, y, w.noise)
    e_k = z - k * y
    se_k = w.noise / max(np.sqrt(np.sum(y * y)), 1e-300)
    typical = float(np.median(np.abs(y)))
    if abs(k - 1) * typical > w.limit and abs(k - 1) > st.significance * se_k and w.better(e_k):
        kind = DiagnosisKind.REVERSED if k < 0 else DiagnosisKind.SCALE
        return (w.mean_loss(e_k, k), 0, kind, {"factor": k}, e_k)
    return None


def _offset(w: _Week) -> Candidate | None:
    """z = y + c."""
    c = float(np.median(w.e0))
    e_c = w.e0 - c
    se_c = 1.2533 * robust_scale(w.e0) / np.sqrt(w.n)
    if abs(c) > w.limit and abs(c) > w.st.significance * se_c and w.better(e_c):
        return (w.mean_loss(e_c), 1, DiagnosisKind.OFFSET, {"offset": c}, e_c)
    return None


def _drift(w: _Week) -> Candidate | None:
    """z = y + a·(t − t₀)⁺."""
    t = w.t
    t0, a, _ = fit_drift(t, w.e0)
    if not np.isfinite(t0):
        return None
    reach = abs(a) * (t.max() - t0)
    ramp = np.maximum(t - t0, 0.0)
    e_d = w.e0 - a * ramp
    se_a = w.noise / max(np.sqrt(np.sum(ramp * ramp)), 1e-300)
    if reach > w.limit and abs(a) > w.st.significance * se_a and w.better(e_d):
        return (w.mean_loss(e_d), 2, DiagnosisKind.DRIFT, {"drift_per_day": a, "onset_days": t0},
                e_d)
    return None


def _tie_break(candidates: list[Candidate], ps: PointSeries) -> Candidate:
    """Lowest mean error wins; near-ties (within 10 %) go to the likelier explanation: a
    reversal or a gain with a known cause, then an offset, then any gain, then a drift."""
    best_loss = min(cand[0] for cand in candidates)
    near = [cand for cand in candidates if cand[0] <= 1.1 * best_loss + 1e-12]

    def prior(cand: Candidate) -> int:
        kind_c, params_c = cand[2], cand[3]
        if kind_c == DiagnosisKind.REVERSED and abs(params_c["factor"] + 1) < 0.05:
            return 0
        if kind_c in (DiagnosisKind.SCALE, DiagnosisKind.REVERSED) and ps.known_factor is not None \
                and ps.known_factor(params_c["factor"]):
            return 0
        return {DiagnosisKind.OFFSET: 1, DiagnosisKind.SCALE: 2, DiagnosisKind.REVERSED: 2,
                DiagnosisKind.DRIFT: 3}[kind_c]

    return min(near, key=lambda cand: (prior(cand), cand[0]))


def _noisy_or_healthy(w: _Week) -> PointDiagnosis:
    """A scatter well beyond the expected noise → noisy; otherwise healthy."""
    st, noise, loss0, n = w.st, w.noise, w.loss0, w.n
    scatter = robust_scale(w.e0)
    if scatter > st.noisy_factor * noise and scatter > w.ps.class_limit / 3.0 * st.noisy_factor:
        return PointDiagnosis(
            DiagnosisKind.NOISY,
            confidence=float(min(1.0, 1 - st.noisy_factor * noise / scatter + 0.5)),
            params={"scatter": scatter, **_storage(w.ps, noise)}, n_used=n,
            loss_healthy=loss0,
            loss_model=loss0,
        )
    return PointDiagnosis(DiagnosisKind.HEALTHY, n_used=n, loss_healthy=loss0, loss_model=loss0,
                          params={"scatter": scatter, "bias": float(np.median(w.e0))})


def classify_point(ps: PointSeries, settings: ClassifySettings | None = None) -> PointDiagnosis:
    """Classify one point from its measured and implied series (rules in the module
    docstring): insufficient data, stuck, the fault models and their tie-break, noisy or
    healthy."""
    st = settings or ClassifySettings()
    valid = np.isfinite(ps.z) & np.isfinite(ps.y)
    n = int(valid.sum())
    if n < st.min_snapshots:
        return PointDiagnosis(DiagnosisKind.INSUFFICIENT, n_used=n,
                              reason=f"only {n} snapshots with a measured and an implied value")
    # A reading held within its deadband lags the true value by up to the deadband, evenly
    # spread (σ = deadband/√3), and one rounded to its resolution is off by up to half a step
    # (σ = step/√12, uniform quantization error; common practice, no source): both are part
    # of the expected scatter, and a systematic error smaller than class limit plus deadband
    # plus half a step is not a fault a healthy meter could not show.
    noise = float(np.sqrt(ps.sigma ** 2 + ps.sigma_implied ** 2 + ps.deadband ** 2 / 3.0
                          + ps.resolution ** 2 / 12.0))
    w = _Week(ps, st, ps.t_days[valid], ps.z[valid], ps.y[valid], noise,
              ps.class_limit * st.class_margin + ps.deadband + ps.resolution / 2.0)
    # Frozen values first: they would distort every other fit.
    stuck = _stuck(w)
    if stuck is not None:
        return stuck
    candidates = [c for c in (_gain(w), _offset(w), _drift(w)) if c is not None]
    if candidates:
        _, _, kind, params, e_m = _tie_break(candidates, ps)
        loss = float(np.median(np.abs(e_m)))
        return PointDiagnosis(kind, _confidence(e_m, w.e0, w.noise), params, n, w.loss0, loss)
    return _noisy_or_healthy(w)
