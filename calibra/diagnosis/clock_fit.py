"""The time shift that best aligns a group of points' readings with their implied values.

A clock that runs ``τ`` late stamps at ``t`` what was true at ``t − τ``: the reading z(t)
equals the implied value y(t − τ), so z(t + τ) − y(t) is only noise. For every whole number
``s`` of snapshot intervals in ±``max_steps`` the readings are moved by ``s`` rows and the
robust misfit J(s) = Σ ρ((z(t + s) − y(t) − cᵢ) / σᵢ) summed (Huber ρ, cᵢ each point's median
difference in the unshifted week, so a meter offset is not a clock); the whole-step minimum is
refined by the parabola through it and its neighbours. J is computed coarse to fine (every few
steps, then each step around the best), as J(s) changes smoothly with the shift. Whole steps
only are compared because readings interpolated between two noisy snapshots are less noisy than
real ones, which would pull the minimum to half steps. The uncertainty is the delete-one-chunk
jackknife over time chunks (residuals are correlated in time); the significance is the chunk t
statistic of J(0) − J(ŝ); each point's own chunk t statistic says whether it supports the
shift. The tilt J(−1) − J(+1) says which way the readings lean even when the shift is below
half an interval.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Huber's constant, in units of the point's expected scatter (common practice, no source).
HUBER = 3.0


@dataclass
class ShiftFit:
    """The best shift of a group of points, in snapshot intervals (late positive)."""

    steps: float  #: refined shift
    whole_steps: int  #: the whole-step minimum
    stderr: float  #: jackknife standard error, in intervals
    t_stat: float  #: chunk t statistic of J(0) − J(whole_steps)
    t_without_largest: float  #: the same without the point that gains most
    point_t: np.ndarray  #: each point's chunk t statistic of its own gain
    point_gain: np.ndarray  #: each point's J(0) − J(whole_steps)
    share_chunks: float  #: share of chunks (with a gain or a loss) in which the shift fits better
    at_edge: bool  #: the minimum lies at the end of the searched range
    #: chunk t statistic of J(−1) − J(+1), signed toward ``steps``: which way the readings
    #: lean, even when the shift is below half an interval (and so ``whole_steps`` is 0)
    tilt_t: float = 0.0
    point_tilt_t: np.ndarray | None = None  #: the same per point


def _huber(u: np.ndarray) -> np.ndarray:
    """Huber's ρ: ½u² up to ``HUBER``, linear beyond (as m·(|u| − m/2), m = min(|u|, H))."""
    a = np.abs(u)
    m = np.minimum(a, HUBER)
    a -= 0.5 * m
    a *= m
    return a


def _chunk_t(d: np.ndarray) -> float:
    """t statistic of the mean of per-chunk values (last axis: chunks)."""
    sd = d.std(ddof=1)
    if not np.isfinite(sd) or sd <= 0:
        return 0.0
    return float(d.mean() / (sd / np.sqrt(d.size)))


def _chunk_sums(rho: np.ndarray, chunk_of: np.ndarray, chunks: int) -> np.ndarray:
    """Sums of the rows of ``rho`` per chunk (``chunk_of`` non-decreasing; empty chunks 0):
    contiguous slices summed, far faster than an unbuffered scatter-add."""
    starts = np.searchsorted(chunk_of, np.arange(chunks + 1))
    if np.all(starts[1:] > starts[:-1]):  # no empty chunk: one reduction
        return np.add.reduceat(rho, starts[:-1], axis=0)
    out = np.zeros((chunks, rho.shape[1]))
    for c in range(chunks):
        if starts[c + 1] > starts[c]:
            out[c] = rho[starts[c]:starts[c + 1]].sum(axis=0)
    return out


class _Misfits:
    """J(s) per chunk and point, one shift at a time (the readings, offsets and chunks once)."""

    def __init__(self, z: np.ndarray, y: np.ndarray, noise: np.ndarray, regular: np.ndarray,
                 max_steps: int, chunks: int) -> None:
        k, n = z.shape
        self.max_steps, self.chunks, self.regular = max_steps, chunks, regular
        self.chunk_of = np.minimum(np.arange(k) * chunks // max(k, 1), chunks - 1)
        # Each point's offset from the unshifted week (a lag leaves it: ramps up and down
        # balance), the same for every shift, so J(s) compares shifts under one offset.
        with np.errstate(all="ignore"):
            c = np.nanmedian(np.where(regular[:, max_steps, None], z - y, np.nan), axis=0)
        c = np.where(np.isfinite(c), c, 0.0)
        # In units of each point's scatter, offset removed once: the shift's misfit is then
        # one difference of two slices.
        self.zn = (z - c[None, :]) / noise[None, :]
        self.yn = y / noise[None, :]

    def at(self, s: int) -> tuple[np.ndarray, np.ndarray]:
        """Chunk sums (chunks × points) of ρ at shift ``s`` and each point's count of rows."""
        k, n = self.zn.shape
        lo, hi = max(0, -s), min(k, k - s)
        if hi <= lo:
            return np.zeros((self.chunks, n)), np.zeros(n)
        e = self.zn[lo + s:hi + s] - self.yn[lo:hi]
        irregular = ~self.regular[lo:hi, s + self.max_steps]
        if irregular.any():
            e[irregular] = np.nan
        ok = np.isfinite(e)
        counts = ok.sum(axis=0)
        e[~ok] = 0.0
        return _chunk_sums(_huber(e), self.chunk_of[lo:hi], self.chunks), counts


def _scaled(done: dict[int, tuple[np.ndarray, np.ndarray]]) -> dict[int, np.ndarray]:
    """Each shift's chunk sums (``done``: shift → sums and counts, as :meth:`_Misfits.at`
    gives them) scaled per point to its number of snapshots at shift 0, so a shift that loses
    a few rows at the ends is not favoured."""
    at_zero = done[0][1]
    return {s: sums * (at_zero / np.maximum(counts, 1))[None, :]
            for s, (sums, counts) in done.items()}


def misfits(z: np.ndarray, y: np.ndarray, noise: np.ndarray, regular: np.ndarray,
            max_steps: int, chunks: int) -> np.ndarray:
    """J per shift, chunk and point: array (2·max_steps + 1) × chunks × points, every shift.

    ``regular[t, j]`` says whether snapshot t + s (s = j − max_steps) lies s intervals after t
    (gaps in the index break the shift)."""
    calc = _Misfits(z, y, noise, regular, max_steps, chunks)
    done = {s: calc.at(s) for s in range(-max_steps, max_steps + 1)}
    scaled = _scaled(done)
    return np.stack([scaled[s] for s in range(-max_steps, max_steps + 1)])


def coarse_shifts(max_steps: int) -> tuple[list[int], int]:
    """The shifts searched first and their spacing: −1, 0, +1, both ends and every
    ``spacing``-th shift between; the search then fills in whole steps around the best."""
    spacing = max(1, int(np.ceil(np.sqrt(max_steps / 2.0))))
    grid = {sign * s for s in range(0, max_steps + 1, spacing) for sign in (-1, 1)}
    return sorted(grid | {-1, 0, 1, -max_steps, max_steps}), spacing


def searched_misfits(z: np.ndarray, y: np.ndarray, noise: np.ndarray, regular: np.ndarray,
                     max_steps: int, chunks: int) -> np.ndarray:
    """J as :func:`misfits` returns it, computed coarse to fine: at the coarse shifts, then at
    every whole step within one spacing of the best of them (J over the shift is smooth where
    it matters: a lag's minimum lies within one spacing of the best coarse shift). Shifts not
    computed are linear between their computed neighbours, so no minimum of the sum, or of
    any part of it, falls on one of them."""
    calc = _Misfits(z, y, noise, regular, max_steps, chunks)
    grid, spacing = coarse_shifts(max_steps)
    done = {s: calc.at(s) for s in grid}

    coarse = _scaled(done)
    centre = min(coarse, key=lambda s: coarse[s].sum())
    for s in range(max(-max_steps, centre - spacing + 1),
                   min(max_steps, centre + spacing - 1) + 1):
        if s not in done:
            done[s] = calc.at(s)
    scaled = _scaled(done)
    known = np.array(sorted(scaled))
    values = np.stack([scaled[s] for s in known])  # known × chunks × points
    out = np.empty((2 * max_steps + 1,) + values.shape[1:])
    where = np.searchsorted(known, np.arange(-max_steps, max_steps + 1))
    for j, s in enumerate(range(-max_steps, max_steps + 1)):
        i = where[j]
        if known[i] == s:
            out[j] = values[i]
        else:  # strictly between known[i - 1] and known[i]
            g = (s - known[i - 1]) / (known[i] - known[i - 1])
            out[j] = (1.0 - g) * values[i - 1] + g * values[i]
    return out


def _refine(j_of_s: np.ndarray, centre: int) -> float:
    """The parabola's minimum through the whole-step minimum and its neighbours (index)."""
    if centre <= 0 or centre >= j_of_s.size - 1:
        return float(centre)
    jm, j0, jp = j_of_s[centre - 1], j_of_s[centre], j_of_s[centre + 1]
    den = jm - 2.0 * j0 + jp
    if den <= 0:
        return float(centre)
    return centre + float(np.clip(0.5 * (jm - jp) / den, -0.5, 0.5))


def fit_shift(z: np.ndarray, y: np.ndarray, noise: np.ndarray, regular: np.ndarray,
              max_steps: int, chunks: int = 24) -> ShiftFit:
    """The shift (in intervals) that best aligns readings ``z`` with implied values ``y``
    (k × points, each point's unit; ``noise``: each point's expected scatter of z − y)."""
    J = searched_misfits(z, y, noise, regular, max_steps, chunks)  # shifts × chunks × points
    total = J.sum(axis=(1, 2))
    best = int(np.argmin(total))
    steps = _refine(total, best) - max_steps
    whole = best - max_steps
    gain = J[max_steps] - J[best]  # chunks × points
    d = gain.sum(axis=1)
    point_gain = gain.sum(axis=0)
    largest = int(np.argmax(point_gain)) if point_gain.size else 0
    rest = d - gain[:, largest] if point_gain.size else d
    jack = []
    for c in range(chunks):
        other = total - J[:, c].sum(axis=1)
        jack.append(_refine(other, int(np.argmin(other))) - max_steps)
    jack = np.asarray(jack)
    stderr = float(np.sqrt((chunks - 1) / chunks * np.sum((jack - jack.mean()) ** 2)))
    moved = np.abs(d) > 1e-9
    way = 1.0 if steps >= 0 else -1.0
    tilt = way * (J[max_steps - 1] - J[max_steps + 1])  # chunks × points
    return ShiftFit(
        steps=float(steps), whole_steps=whole, stderr=stderr, t_stat=_chunk_t(d),
        t_without_largest=_chunk_t(rest),
        point_t=np.array([_chunk_t(gain[:, i]) for i in range(gain.shape[1])]),
        point_gain=point_gain,
        share_chunks=float((d[moved] > 0).mean()) if moved.any() else 0.0,
        at_edge=best in (0, total.size - 1),
        tilt_t=_chunk_t(tilt.sum(axis=1)),
        point_tilt_t=np.array([_chunk_t(tilt[:, i]) for i in range(tilt.shape[1])]),
    )


def regular_shifts(times_s: np.ndarray, interval_s: float, max_steps: int) -> np.ndarray:
    """k × (2·max_steps + 1): whether snapshot t + s exists and lies s intervals after t."""
    k = times_s.size
    out = np.zeros((k, 2 * max_steps + 1), bool)
    for j, s in enumerate(range(-max_steps, max_steps + 1)):
        lo, hi = max(0, -s), min(k, k - s)
        if hi > lo:
            step = times_s[lo + s:hi + s] - times_s[lo:hi]
            out[lo:hi, j] = np.abs(step - s * interval_s) <= 0.01 * interval_s
    return out


def shift_back(values: np.ndarray, times_s: np.ndarray, offset_s: float,
               interval_s: float) -> np.ndarray:
    """Columns as a clock ``offset_s`` late would have stamped them right: the value at t is
    the reading stamped t + offset, linear between the two snapshots around it (NaN where one
    of them is missing, beyond the period, or the two are not one interval apart)."""
    target = times_s + offset_s
    right = np.searchsorted(times_s, target, side="left")
    exact = (right < times_s.size) & (np.abs(times_s[np.minimum(right, times_s.size - 1)]
                                             - target) <= 1e-6 * interval_s)
    left = np.where(exact, right, right - 1)
    right = np.where(exact, right, right)
    inside = (left >= 0) & (right < times_s.size)
    li, ri = np.clip(left, 0, times_s.size - 1), np.clip(right, 0, times_s.size - 1)
    span = times_s[ri] - times_s[li]
    inside &= exact | (np.abs(span - interval_s) <= 0.01 * interval_s)
    with np.errstate(invalid="ignore", divide="ignore"):
        g = np.where(exact | (span <= 0), 0.0, (target - times_s[li]) / np.where(span > 0,
                                                                                  span, 1.0))
    a, b = values[li], values[ri]
    out = np.where(g[:, None] == 0.0, a, (1.0 - g[:, None]) * a + g[:, None] * b)
    out[~inside] = np.nan
    return out
