"""Fault models fitted to one point's week: measured value z against the implied value y.

Every model explains the measured series from the implied one (what the rest of the network
says the point should read). The models and their parameters:

- healthy: z = y
- reversed / scale: z = k·y (k = −1 for a reversal)
- offset: z = y + c
- drift: z = y + a·(t − t₀)⁺ (error growing linearly from an onset t₀)
- stuck: z frozen at one value over a run of snapshots while y moves
- noisy: z = y + e with a scatter of e well beyond the accuracy class

Fits use robust statistics (medians, Huber-weighted least squares), because a week of
telemetry has transients, missing data and the occasional spike. Thresholds are tied to the
meter's accuracy class: a systematic deviation must exceed the class limit (accuracy_pct % of
full scale) at the point's typical reading to count as a fault.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Scale factor of the median absolute deviation to a gaussian standard deviation.
MAD_TO_SIGMA = 1.4826


def robust_scale(x: np.ndarray) -> float:
    """Gaussian-equivalent spread from the median absolute deviation."""
    if x.size == 0:
        return float("nan")
    return float(MAD_TO_SIGMA * np.median(np.abs(x - np.median(x))))


def fit_gain(z: np.ndarray, y: np.ndarray, noise: float, iterations: int = 8) -> float:
    """Robust least-squares gain k in z ≈ k·y (Huber weights at 2 noise units)."""
    w = np.ones_like(y)
    k = float(np.sum(z * y) / max(np.sum(y * y), 1e-300))
    for _ in range(iterations):
        e = z - k * y
        a = np.abs(e) / max(noise, 1e-12)
        w = np.where(a <= 2.0, 1.0, 2.0 / np.maximum(a, 1e-12))
        den = np.sum(w * y * y)
        if den <= 0:
            break
        k = float(np.sum(w * z * y) / den)
    return k


def _ramp_fits(t: np.ndarray, e: np.ndarray, onsets: np.ndarray
               ) -> tuple[np.ndarray, np.ndarray]:
    """Least-squares slope a and residual sum of squares of e ≈ a·(t − t₀)⁺ for every onset
    t₀ at once, from suffix sums over the sorted times (O(n + onsets)): with r = (t − t₀)⁺,
    a = Σre / Σr² and SSE = Σe² − (Σre)² / Σr²."""
    se = np.r_[np.cumsum(e[::-1])[::-1], 0.0]
    ste = np.r_[np.cumsum((t * e)[::-1])[::-1], 0.0]
    st = np.r_[np.cumsum(t[::-1])[::-1], 0.0]
    stt = np.r_[np.cumsum((t * t)[::-1])[::-1], 0.0]
    cnt = np.arange(t.size, -1, -1, dtype=float)
    k = np.searchsorted(t, onsets, side="right")
    sre = ste[k] - onsets * se[k]
    srr = stt[k] - 2.0 * onsets * st[k] + onsets ** 2 * cnt[k]
    ok = srr > 1e-300
    a = np.where(ok, sre / np.where(ok, srr, 1.0), 0.0)
    sse = float(np.dot(e, e)) - np.where(ok, sre * a, 0.0)
    return a, sse


def fit_drift(t: np.ndarray, e: np.ndarray,
              grid_step: float = 1.0 / 24) -> tuple[float, float, float]:
    """Best linear drift from an onset: e ≈ a·(t − t₀)⁺, t in days (ascending).

    Scans onsets on a grid (hourly by default) then refines around the best one; returns
    (t₀, a, loss) with loss the median |residual|.
    """
    if t.size < 3:
        return float("nan"), 0.0, float("inf")
    t0s = np.arange(t.min(), t.max() - grid_step, grid_step)
    if t0s.size == 0:
        return float("nan"), 0.0, float("inf")
    t = np.asarray(t, float)
    e = np.asarray(e, float)
    _, sse = _ramp_fits(t, e, t0s)
    j = int(np.argmin(sse))
    # Refine on a finer grid around the best coarse onset.
    fine = np.linspace(t0s[max(j - 1, 0)], t0s[min(j + 1, t0s.size - 1)], 25)
    a_f, sse_f = _ramp_fits(t, e, fine)
    jf = int(np.argmin(sse_f))
    loss = float(np.median(np.abs(e - a_f[jf] * np.maximum(t - fine[jf], 0.0))))
    return float(fine[jf]), float(a_f[jf]), loss


@dataclass
class StuckRun:
    start: int  # index into the valid series
    stop: int  # exclusive
    value: float


def find_stuck_runs(z: np.ndarray, y: np.ndarray, resolution: float, min_length: int,
                    min_implied_spread: float) -> list[StuckRun]:
    """Runs of at least ``min_length`` snapshots where z does not change (within
    ``resolution``) while the implied value moves by more than ``min_implied_spread``."""
    if z.size < min_length:
        return []
    same = np.abs(np.diff(z)) <= resolution
    # A run ends wherever z changes; runs are [starts[r], stops[r]).
    breaks = np.flatnonzero(~same) + 1
    starts = np.r_[0, breaks]
    stops = np.r_[breaks, z.size]
    long = stops - starts >= min_length
    runs = []
    for a, b in zip(starts[long], stops[long], strict=True):
        if np.ptp(y[a:b]) > min_implied_spread:
            runs.append(StuckRun(int(a), int(b), float(np.median(z[a:b]))))
    return runs
