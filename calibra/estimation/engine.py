"""Where a period's snapshots are estimated: on this machine, or elsewhere.

The week review asks an engine to estimate a selection of the period's snapshots (every
snapshot, or every n-th for screening) with some points set aside. :class:`LocalEngine` does it
here with :func:`~calibra.estimation.week.estimate_period` (worker processes over blocks); a
cluster engine does the same day by day on remote workers that read the snapshots themselves.
Blocks never cross a UTC day, so both give the same blocks and the same results.
"""

from __future__ import annotations

from typing import Protocol

import numpy as np

from calibra.estimation.period import PreparedPeriod
from calibra.estimation.week import PeriodResult, SolverSettings, estimate_period


class PeriodEngine(Protocol):
    def estimate(self, period: PreparedPeriod, rows: np.ndarray, set_aside: np.ndarray, *,
                 settings: SolverSettings, progress=None, by_day: bool = True) -> PeriodResult:
        """Estimate snapshots ``rows`` (positions in ``period``) without the set-aside points.
        ``by_day=False``: blocks may cross days (a thin sample such as the screening's, where
        one block per day would hold a handful of snapshots)."""
        ...


class LocalEngine:
    """Estimates on this machine from the period's values already in memory (per unit), in
    ``workers`` processes (default: :func:`~calibra.estimation.runtime.default_workers`)."""

    def __init__(self, workers: int | None = None):
        self.workers = workers

    def estimate(self, period: PreparedPeriod, rows: np.ndarray, set_aside: np.ndarray, *,
                 settings: SolverSettings, progress=None, by_day: bool = True) -> PeriodResult:
        z = np.where(set_aside[None, :], np.nan, period.z[rows])
        return estimate_period(period.estimator, z, period.in_service[rows], period.index[rows],
                               settings=settings, progress=progress, workers=self.workers,
                               by_day=by_day)
