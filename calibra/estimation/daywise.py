"""Estimating a long period day by day, in memory that does not grow with its length.

A month of one-minute snapshots of a few thousand points does not need to be in memory at
once to be estimated: :func:`estimate_by_day` reads one UTC day of the site's snapshot files at
a time (only that day's rows are read), estimates it with the block engine, folds the normalized
residuals into running per-point statistics (:class:`PointTally`) and, when asked, writes the
day's results to files; then the day is dropped. Peak memory is one day's work plus the model,
whatever the number of days (measured in ``benchmarks/month_memory.py``).

Days are UTC days, as the block engine's blocks never cross one, so the estimates are the same
as those of one call over the whole period.
"""

from __future__ import annotations

import time
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from calibra.estimation.block_parts import observability_counts
from calibra.estimation.measurement_model import MeasurementModel
from calibra.estimation.period import prepare_period
from calibra.estimation.week import PeriodResult, SolverSettings, estimate_period
from calibra.estimation.wls import Estimator
from calibra.io.site_folder import open_history, resolve_period
from calibra.model.availability import availability_lines
from calibra.model.site import LoadProblem, Site

#: Bin edges of |rN| for the running per-point distribution (the median is read from them):
#: steps of 0.05 up to 10, then 200 geometric steps (4.7 % each) up to 10⁵, then one open bin.
RN_BIN_EDGES = np.r_[np.arange(0.0, 10.0, 0.05), np.geomspace(10.0, 1e5, 201)]
#: |rN| above this counts as "beyond" in the tallies (a usual screening threshold; common
#: practice, no source).
RN_SCREEN = 3.0


@dataclass
class PointTally:
    """Running statistics of each point's normalized residuals over many days.

    The distribution of |rN| is kept as a histogram of fixed bins (``RN_BIN_EDGES``), so the
    median is known to within half a bin (0.025 below 10, 2.4 % above) whatever the number of
    snapshots.
    """

    tags: pd.Index
    count: np.ndarray = field(init=False)
    beyond: np.ndarray = field(init=False)
    sum_abs: np.ndarray = field(init=False)
    max_abs: np.ndarray = field(init=False)
    histogram: np.ndarray = field(init=False)

    def __post_init__(self) -> None:
        m = len(self.tags)
        bins = RN_BIN_EDGES.size  # the last bin is open above the last edge
        self.count = np.zeros(m, np.int64)
        self.beyond = np.zeros(m, np.int64)
        self.sum_abs = np.zeros(m)
        self.max_abs = np.zeros(m)
        self.histogram = np.zeros((m, bins), np.int64)

    def add(self, rn: np.ndarray) -> None:
        """Fold in normalized residuals (k × m; NaN where a point has none)."""
        a = np.abs(rn.astype(float))
        ok = np.isfinite(a)
        self.count += ok.sum(axis=0)
        self.beyond += (ok & (a > RN_SCREEN)).sum(axis=0)
        self.sum_abs += np.where(ok, a, 0.0).sum(axis=0)
        if len(a):
            self.max_abs = np.maximum(self.max_abs, np.where(ok, a, 0.0).max(axis=0))
        which = np.searchsorted(RN_BIN_EDGES, np.where(ok, a, 0.0), side="right") - 1
        cols = np.broadcast_to(np.arange(a.shape[1]), a.shape)
        np.add.at(self.histogram, (cols[ok], which[ok]), 1)

    def median(self) -> np.ndarray:
        """Median |rN| per point (middle of its bin; NaN without data; the open bin reads as
        its lower edge)."""
        cum = np.cumsum(self.histogram, axis=1)
        half = (self.count + 1) // 2
        pos = np.minimum((cum < half[:, None]).sum(axis=1), RN_BIN_EDGES.size - 1)
        upper = np.r_[RN_BIN_EDGES[1:], RN_BIN_EDGES[-1]]
        mid = (RN_BIN_EDGES[pos] + upper[pos]) / 2
        return np.where(self.count > 0, mid, np.nan)

    def frame(self) -> pd.DataFrame:
        """One row per point: samples, median and mean |rN|, share beyond RN_SCREEN, max."""
        with np.errstate(invalid="ignore", divide="ignore"):
            return pd.DataFrame({
                "samples": self.count,
                "median_abs_rn": self.median(),
                "mean_abs_rn": self.sum_abs / self.count,
                "share_beyond": self.beyond / self.count,
                "max_abs_rn": np.where(self.count > 0, self.max_abs, np.nan),
            }, index=self.tags)


@dataclass
class DaywiseSummary:
    """What :func:`estimate_by_day` found over the whole period (``site``: the network and
    point list, without snapshots)."""

    site: Site | None = None
    days: int = 0
    snapshots: int = 0
    converged: int = 0
    in_blocks: int = 0
    alone: int = 0
    chi2_failed: int = 0
    not_observable: int = 0
    partly_observable: int = 0
    most_buses_not_estimated: int = 0
    reasons: Counter = field(default_factory=Counter)
    availability: list[str] = field(default_factory=list)
    conflicts: list[str] = field(default_factory=list)
    problems: list[LoadProblem] = field(default_factory=list)
    points: PointTally | None = None
    seconds: float = 0.0
    files: list[Path] = field(default_factory=list)

    def add_day(self, result: PeriodResult) -> None:
        out = result.outcomes
        conv = out["converged"].astype(bool).to_numpy()
        self.days += 1
        self.snapshots += len(out)
        self.converged += int(conv.sum())
        self.in_blocks += int((out["method"] == "block").sum())
        self.alone += int((out["method"] == "single").sum())
        self.chi2_failed += int((~out.loc[conv, "chi2_passed"].astype(bool)).sum())
        counts = observability_counts(out)
        self.not_observable += counts["not_observable"]
        self.partly_observable += counts["partly_observable"]
        self.most_buses_not_estimated = max(self.most_buses_not_estimated,
                                            counts["most_buses_not_estimated"])
        self.reasons.update(out.loc[~conv, "reason"].astype(str))


def normalized_residuals(result: PeriodResult) -> np.ndarray:
    """rᴺ = r / √Ωᵢᵢ (k × m, float32; NaN where undefined)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        rn = result.residual / np.sqrt(result.omega)
    return np.where(np.isfinite(rn), rn, np.nan).astype(np.float32)


def utc_days(times: pd.DatetimeIndex, start: pd.Timestamp | None = None,
             end: pd.Timestamp | None = None) -> list[tuple[pd.Timestamp, pd.Timestamp]]:
    """(first, last) instants of each UTC day holding a snapshot time within start..end."""
    if start is not None:
        times = times[times >= start]
    if end is not None:
        times = times[times <= end]
    out = []
    for day in times.normalize().unique():
        first = max(day, start) if start is not None else day
        last = day + pd.Timedelta(days=1) - pd.Timedelta(1, "ns")
        out.append((first, min(last, end) if end is not None else last))
    return out


def estimate_by_day(
    folder: str | Path,
    start: pd.Timestamp | str | None = None,
    end: pd.Timestamp | str | None = None,
    *,
    out_dir: str | Path | None = None,
    confidence: float = 0.99,
    workers: int | None = None,
    progress=None,
) -> DaywiseSummary:
    """Estimate every snapshot of the site folder from ``start`` to ``end`` (both included; naive
    times in the site's timezone; None: open), one UTC day at a time.

    With ``out_dir``, each day's results are written there: ``normalized_residuals/DAY.parquet``
    (one float32 column per point) and ``snapshots/DAY.csv`` (one row per snapshot: converged,
    iterations, method, objective, degrees of freedom, chi-square threshold and verdict).
    ``progress`` (:class:`calibra.progress.Progress`) is told after every day and may cancel.
    Raises :class:`calibra.model.site.SiteLoadError` when the site or a day cannot be loaded,
    ValueError when ``start``/``end`` is not a time.
    """
    # The network, the point list and every file's times once; then one day's rows at a time.
    history = open_history(folder)
    base = history.base
    start, end = resolve_period(start, end, base.timezone) or (None, None)
    model = MeasurementModel.from_points(base.network, base.points)
    estimator = Estimator(model)
    days = utc_days(history.times(), start, end)
    summary = DaywiseSummary(site=base, points=PointTally(pd.Index(model.tags)))
    summary.problems += base.problems
    seen: set[str] = {str(p) for p in base.problems}
    out = Path(out_dir) if out_dir is not None else None
    if out is not None:
        (out / "normalized_residuals").mkdir(parents=True, exist_ok=True)
        (out / "snapshots").mkdir(parents=True, exist_ok=True)
    t0 = time.perf_counter()
    for i, (a, b) in enumerate(days):
        site = history.load(a, b)
        for problem in site.problems:
            if str(problem) not in seen:
                seen.add(str(problem))
                summary.problems.append(problem)
        summary.availability += availability_lines(site)
        snaps = site.snapshots
        if snaps.empty:
            continue
        day = prepare_period(site, snaps, estimator=estimator)
        summary.conflicts += [c.describe(site.timezone) for c in day.status_conflicts]
        result = estimate_period(estimator, day.z, day.in_service, day.index,
                                 settings=SolverSettings(confidence=confidence), workers=workers)
        del day, site
        rn = normalized_residuals(result)
        summary.points.add(rn)
        summary.add_day(result)
        if out is not None:
            name = f"{a:%Y-%m-%d}"
            frame = pd.DataFrame(rn, index=snaps.index, columns=pd.Index(model.tags, dtype=str))
            path = out / "normalized_residuals" / f"{name}.parquet"
            frame.to_parquet(path)
            table = result.outcomes[["converged", "iterations", "method", "objective", "dof",
                                     "chi2_threshold", "chi2_passed", "observable",
                                     "islands", "buses_not_estimated"]]
            table.to_csv(out / "snapshots" / f"{name}.csv", index_label="timestamp")
            summary.files += [path, out / "snapshots" / f"{name}.csv"]
        del result, rn, snaps
        if progress is not None:
            progress.update(i + 1, len(days), f"estimated {a:%Y-%m-%d}")
    summary.seconds = time.perf_counter() - t0
    return summary
