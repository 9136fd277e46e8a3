"""Tap-position points judged against the tap ratio the network implies, and transformers
without tap telemetry whose ratio steps.

For a telemetered tap the implied ratio of each run of constant step
(:mod:`calibra.diagnosis.tap_ratios`) is turned into an implied step number with the model's
neutral step and step size, and the implied steps ``u`` are compared with the telemetered ``s``
over the runs (weighted least squares ``u = α + β s``, scaled by the scatter about the fit):

- the telemetered step does not move while the implied one does: frozen;
- β clearly negative: the step counts the wrong way (inverted);
- β clearly off 1: the step size of the model is wrong (the implied one is β × modelled);
- otherwise a constant difference of a whole number ``n`` of steps: offset by ``n``.

A transformer without tap telemetry whose implied ratio steps back and forth over the week by
more than ``moving_pct`` is a moving tap the model holds fixed. The thresholds are common
practice, no source.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from calibra.diagnosis.findings import FindingKind
from calibra.diagnosis.tap_ratios import RatioRun
from calibra.model.tap_changers import ratio_step, step_ratio


@dataclass(frozen=True)
class TapSettings:
    """How tap positions and untelemetered taps are judged."""

    run_hours: float = 6.0  #: longest run of constant step (or chunk) in one joint fit
    min_run: int = 3  #: fewest snapshots of a run
    per_run: int = 3  #: snapshots of a run in its joint fit
    per_chunk: int = 2  #: snapshots of a short chunk (``unreported_hours``) in its joint fit
    min_t: float = 5.0  #: significance of a finding (estimate / its scaled σ)
    min_offset_steps: float = 0.6  #: smallest constant difference reported, in steps
    slope_tolerance: float = 0.3  #: |β − 1| beyond which the step size is wrong
    frozen_steps: float = 1.5  #: implied motion (steps) under a constant telemetered step
    moving_pct: float = 1.0  #: range of implied ratio (% of nominal) of an unreported moving tap
    unreported_hours: float = 1.0  #: chunks of the ratio series used for an unreported tap
    max_candidates: int = 3  #: untelemetered transformers examined per review
    #: Meters around an untelemetered transformer, with faults no single meter error fits
    #: well, that make it worth examining.
    min_unexplained: int = 2


@dataclass
class TapVerdict:
    """What the review concludes about one transformer's tap (``kind`` None: consistent)."""

    branch: str
    tag: str  # the tap-position point ('' for a transformer without one)
    kind: FindingKind | None
    runs: list[RatioRun]
    offset_steps: float = float("nan")
    slope: float = float("nan")
    t_statistic: float = 0.0
    #: Branch-state factor per snapshot the review uses instead of the telemetered (or the
    #: model's) ratio once the verdict is a fault.
    factors: np.ndarray | None = field(default=None, repr=False)

    @property
    def confidence(self) -> float:
        return float(min(0.99, 1.0 - np.exp(-self.t_statistic / 2.5)))


def _weighted_mean(x: np.ndarray, sd: np.ndarray) -> tuple[float, float]:
    """Weighted mean and its σ, scaled up by the scatter about it when that exceeds σ."""
    w = 1.0 / np.maximum(sd, 1e-9) ** 2
    mean = float(np.sum(w * x) / np.sum(w))
    chi2 = float(np.sum(w * (x - mean) ** 2))
    scale = max(1.0, chi2 / max(len(x) - 1, 1))
    return mean, float(np.sqrt(scale / np.sum(w)))


def _line(s: np.ndarray, u: np.ndarray, sd: np.ndarray) -> tuple[float, float, float, float]:
    """Weighted fit u = α + β s: (α, β, σα, σβ), scaled by the scatter about the line."""
    w = 1.0 / np.maximum(sd, 1e-9) ** 2
    X = np.c_[np.ones_like(s), s]
    G = X.T @ (w[:, None] * X)
    coef = np.linalg.solve(G, X.T @ (w * u))
    chi2 = float(np.sum(w * (u - X @ coef) ** 2))
    cov = np.linalg.inv(G) * max(1.0, chi2 / max(len(u) - 2, 1))
    return float(coef[0]), float(coef[1]), float(np.sqrt(cov[0, 0])), float(np.sqrt(cov[1, 1]))


def judge_tap_point(runs: list[RatioRun], neutral: float, step_pct: float,
                    settings: TapSettings) -> tuple[FindingKind | None, dict]:
    """The verdict on a tap-position point from its runs: a finding kind (None: consistent)
    and its figures (``offset_steps``, ``slope``, ``t``)."""
    st = settings
    if len(runs) < 2:
        return None, {"t": 0.0}
    s = np.array([r.step for r in runs])
    u = ratio_step(np.array([r.ratio for r in runs]), neutral, step_pct)
    sd = np.array([r.std for r in runs]) * 100.0 / step_pct
    if s.max() - s.min() < 1.0:
        lo, hi = np.percentile(u, [5, 95])
        spread = float(hi - lo)
        t = spread / max(float(np.median(sd)), 1e-9)
        if spread >= st.frozen_steps and t >= st.min_t:
            return FindingKind.TAP_FROZEN, {"t": t, "spread": spread}
        return _offset(s, u, sd, st)
    alpha, beta, _, sb = _line(s, u, sd)
    t_beta = abs(beta - 1.0) / max(sb, 1e-9)
    if beta < -st.slope_tolerance and t_beta >= st.min_t:
        return FindingKind.TAP_INVERTED, {"t": t_beta, "slope": beta}
    if abs(beta - 1.0) > st.slope_tolerance and t_beta >= st.min_t:
        return FindingKind.TAP_STEP_SIZE, {"t": t_beta, "slope": beta}
    return _offset(s, u, sd, st)


def _offset(s, u, sd, st: TapSettings) -> tuple[FindingKind | None, dict]:
    d, sd_d = _weighted_mean(s - u, sd)
    t = abs(d) / max(sd_d, 1e-9)
    n = int(np.round(d))
    if abs(d) >= st.min_offset_steps and n != 0 and t >= st.min_t:
        return FindingKind.TAP_OFFSET, {"t": t, "offset_steps": n, "difference": d}
    return None, {"t": t, "difference": d}


def moving_ratio(runs: list[RatioRun], settings: TapSettings) -> tuple[bool, float]:
    """Whether the implied ratios of consecutive chunks step back and forth by more than
    ``moving_pct`` (a monotone drift is a meter's, not a tap's), and the significance."""
    if len(runs) < 4:
        return False, 0.0
    r = np.array([x.ratio for x in runs])
    sd = np.array([x.std for x in runs])
    lo, hi = np.percentile(r, [5, 95])
    spread_pct = 100.0 * float(hi - lo)
    noise = max(float(np.median(sd)), 1e-9)
    t = (hi - lo) / noise
    moves = np.diff(r)
    big = moves[np.abs(moves) > max(3.0 * noise, 0.25 * (hi - lo))]
    reversals = int(np.sum(np.sign(big[1:]) != np.sign(big[:-1]))) if big.size > 1 else 0
    return (spread_pct >= settings.moving_pct and t >= settings.min_t and reversals >= 2), \
        float(t)


def factors_from_runs(runs: list[RatioRun], k: int, model_ratio: float) -> np.ndarray:
    """Branch-state factors per snapshot from the implied ratio of each run; snapshots
    between runs take the previous run's (the first run's before it)."""
    ratio = np.full(k, np.nan)
    for r in runs:
        ratio[r.start:r.end] = r.ratio
    filled = pd.Series(ratio).ffill().bfill().to_numpy()
    return filled / model_ratio


def offset_factors(steps: np.ndarray, n: int, neutral: float, step_pct: float,
                   model_ratio: float) -> np.ndarray:
    """Factors of a tap point read ``n`` steps high: the ratio of step − n."""
    ratio = step_ratio(steps - n, neutral, step_pct)
    return np.where(np.isfinite(ratio), ratio, model_ratio) / model_ratio


def moved_times(runs: list[RatioRun], index: pd.DatetimeIndex, step: float
                ) -> list[pd.Timestamp]:
    """Starts of the chunks whose implied ratio differs from the previous chunk's by more
    than half of ``step`` (a ratio, e.g. 0.0125)."""
    out = []
    for prev, run in zip(runs[:-1], runs[1:], strict=True):
        if abs(run.ratio - prev.ratio) > 0.5 * step:
            out.append(index[run.start])
    return out
