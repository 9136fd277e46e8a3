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
import pandas as pd

from calibra.estimation.week import PeriodResult, estimate_period
from calibra.estimation.wls import Estimator


class PeriodEngine(Protocol):
    def estimate(self, rows: np.ndarray, set_aside: np.ndarray, max_block: int,
                 tolerance: float, confidence: float, progress=None,
                 by_day: bool = True) -> PeriodResult:
        """Estimate snapshots ``rows`` (positions in the period) without the set-aside points.
        ``by_day=False``: blocks may cross days (a thin sample such as the screening's, where
        one block per day would hold a handful of snapshots)."""
        ...


class LocalEngine:
    """Estimates on this machine from the period's values already in memory (per unit)."""

    def __init__(self, estimator: Estimator, z: np.ndarray, in_service: np.ndarray,
                 index: pd.DatetimeIndex, workers: int | None = None):
        self.estimator = estimator
        self.z = z
        self.in_service = in_service
        self.index = index
        self.workers = workers

    def estimate(self, rows: np.ndarray, set_aside: np.ndarray, max_block: int,
                 tolerance: float, confidence: float, progress=None,
                 by_day: bool = True) -> PeriodResult:
        z = np.where(set_aside[None, :], np.nan, self.z[rows])
        return estimate_period(self.estimator, z, self.in_service[rows], self.index[rows],
                               max_block, confidence, progress, tolerance, self.workers,
                               by_day=by_day)
