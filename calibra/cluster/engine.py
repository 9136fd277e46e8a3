"""A period engine that estimates day by day on a Dask cluster (``dask.distributed``).

:class:`ClusterEngine` implements :class:`~calibra.estimation.engine.PeriodEngine`: the
requested snapshots are cut at every day (blocks never cross one, see
:func:`~calibra.estimation.week.topology_runs`), each day becomes one task that a worker runs on
the data it reads itself (:mod:`calibra.cluster.worker`), and the results are put back in
order, so the review on the client sees exactly what a local run gives. A worker lost mid-run
only delays its day: the scheduler runs it again elsewhere, and each day's result is placed
once.
"""

from __future__ import annotations

import time
import uuid
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from calibra.cluster.period import (
    ClusterError,
    DayDigests,
    correction_records,
    day_bounds,
    day_starts,
)
from calibra.cluster.worker import DayJob, DayResult, estimate_day
from calibra.estimation.engine import LocalEngine
from calibra.estimation.period import PreparedPeriod
from calibra.estimation.week import PeriodResult, SolverSettings
from calibra.progress import Cancelled, Progress

#: Seconds between looks at the cancel flag while waiting for the cluster.
POLL_SECONDS = 0.1


def distributed_module():
    """The ``distributed`` package, or a clear error naming the optional extra."""
    try:
        import distributed
    except ImportError:
        raise ClusterError("running on a cluster needs Dask: pip install 'calibra[cluster]'") \
            from None
    return distributed


@dataclass
class _Plan:
    """What the engine sends for one prepared period: where the workers read the site, the
    period's bounds and corrections as plain data, its days and their digests."""

    period: PreparedPeriod
    location: str
    starts: np.ndarray
    days: list[tuple[int, int, str]]
    site_digest: str
    records: tuple
    held: tuple[tuple[str, int], ...]


class ClusterEngine:
    """Estimates a prepared period (:class:`~calibra.estimation.period.PreparedPeriod`) on the
    workers of a Dask ``client``.

    The workers read the period's site themselves and prepare the same period from it
    (:func:`calibra.review_period.select_period` with the period's corrections).
    ``worker_site`` is the site folder as the workers see it: a path or an fsspec URL (default:
    the site's folder's absolute path). ``progress`` reports days as they finish and cancels
    the outstanding ones.
    """

    def __init__(self, client, worker_site: str | None = None,
                 progress: Progress | None = None, retries: int = 2):
        self.client = client
        self.worker_site = None if worker_site is None else str(worker_site)
        self.progress = progress
        self.retries = retries
        self._plan: _Plan | None = None
        self._token = uuid.uuid4().hex[:8]
        #: Days estimated per worker address (the last call), for reports and tests.
        self.workers_used: dict[str, int] = {}

    # ------------------------------------------------------------------ PeriodEngine
    def estimate(self, period: PreparedPeriod, rows: np.ndarray, set_aside: np.ndarray, *,
                 settings: SolverSettings, progress=None, by_day: bool = True) -> PeriodResult:
        """Estimate snapshots ``rows`` (positions in ``period``) without the set-aside points.

        ``by_day=False`` (a thin sample whose blocks cross days, such as the screening's) is
        estimated here, from the period this client prepared: a handful of snapshots per day
        would cost the cluster more in transfers than it saves."""
        rows = np.asarray(rows, dtype=np.int64)
        progress = progress or self.progress
        if not by_day:
            return LocalEngine().estimate(period, rows, set_aside, settings=settings,
                                          progress=progress, by_day=False)
        plan = self._planned(period)
        k = len(period.index)
        if rows.size and (rows.min() < 0 or rows.max() >= k):
            raise IndexError(f"snapshot positions must lie in 0..{k - 1}")
        set_aside = np.asarray(set_aside, dtype=bool)
        if set_aside.shape != (period.model.m,):
            raise ValueError(f"set_aside needs one flag per point ({period.model.m})")
        segments = self._segments(plan, rows)
        jobs = [self._job(plan, rows[a:b], day, set_aside, settings) for a, b, day in segments]
        results = self._run(jobs, [b - a for a, b, _ in segments], progress)
        return self._assemble(period, rows, segments, results)

    # ------------------------------------------------------------------ pieces
    def _planned(self, period: PreparedPeriod) -> _Plan:
        """The plan of ``period``, made once (a review hands the same period to every pass)."""
        if self._plan is not None and self._plan.period is period:
            return self._plan
        site = period.site
        if self.worker_site is None and site.path is None:
            raise ValueError("a cluster review needs a site read from a folder the workers see")
        location = self.worker_site or str(Path(site.path).resolve())
        digests = DayDigests(period)
        days = [(a, b, digests.day(a, b)) for a, b in day_bounds(period.index)]
        held = tuple(sorted((t, int(at.value)) for t, at in period.held_out.items()))
        self._plan = _Plan(period, location, day_starts(period.index), days,
                           digests.site_digest, correction_records(period.corrections), held)
        return self._plan

    @staticmethod
    def _segments(plan: _Plan, rows: np.ndarray) -> list[tuple[int, int, int]]:
        """Maximal runs of consecutive requested rows within one day: (first, end, day number).

        The local engine breaks blocks wherever the day changes between consecutive rows, so
        these segments hold exactly its blocks, whatever the order of ``rows``."""
        if rows.size == 0:
            return []
        day = np.searchsorted(plan.starts, rows, side="right") - 1
        cut = np.flatnonzero(np.r_[True, day[1:] != day[:-1]])
        ends = np.r_[cut[1:], rows.size]
        return [(int(a), int(b), int(day[a])) for a, b in zip(cut, ends, strict=True)]

    @staticmethod
    def _job(plan: _Plan, rows: np.ndarray, day: int, set_aside: np.ndarray,
             settings: SolverSettings) -> DayJob:
        first, end, digest = plan.days[day]
        index = plan.period.index
        return DayJob(plan.location, int(index[0].value), int(index[-1].value), plan.records,
                      plan.site_digest, first, end, digest, rows, set_aside, settings, plan.held)

    def _run(self, jobs: list[DayJob], sizes: list[int], progress) -> list[DayResult]:
        distributed = distributed_module()
        client = self.client
        futures = [client.submit(estimate_day, job, retries=self.retries, pure=False,
                                 key=f"calibra-day-{self._token}-{uuid.uuid4().hex[:8]}")
                   for job in jobs]
        position = {f.key: i for i, f in enumerate(futures)}
        results: list[DayResult | None] = [None] * len(jobs)
        total, done = sum(sizes), 0
        self.workers_used = {}
        waiting = distributed.as_completed(futures)
        try:
            while not waiting.is_empty():
                if progress is not None and progress.cancelled:
                    raise Cancelled("estimating on the cluster")
                finished = waiting.next_batch(block=False)
                if not finished:
                    time.sleep(POLL_SECONDS)
                    continue
                for future in finished:
                    i = position[future.key]
                    if results[i] is not None:  # already placed (never twice)
                        continue
                    try:
                        results[i] = future.result()
                    except distributed.KilledWorker as exc:
                        raise ClusterError(f"every worker that ran a day died: {exc}") from None
                    future.release()
                    done += sizes[i]
                    name = results[i].worker
                    self.workers_used[name] = self.workers_used.get(name, 0) + 1
                    if progress is not None:
                        progress.update(done, total, "estimating on the cluster")
        except BaseException:
            client.cancel([f for f in futures if f.status != "finished"])
            # Finished days not yet collected too: the traceback keeps this frame (and the
            # futures) alive until a garbage collection, and with them the days' results.
            for f in futures:
                f.release()
            raise
        return results

    @staticmethod
    def _assemble(period: PreparedPeriod, rows: np.ndarray, segments,
                  results: list[DayResult]) -> PeriodResult:
        k, n, m = rows.size, period.model.network.n_bus, period.model.m
        idx = period.index[rows]
        vm = np.full((k, n), np.nan, np.float32)
        va = np.full((k, n), np.nan, np.float32)
        res = np.full((k, m), np.nan, np.float32)
        om = np.full((k, m), np.nan, np.float32)
        frames = []
        for (a, b, _), r in zip(segments, results, strict=True):
            if len(r.outcomes) != b - a:
                raise ClusterError(f"worker {r.worker} returned {len(r.outcomes)} snapshots "
                                   f"for a day of {b - a}")
            vm[a:b], va[a:b], res[a:b], om[a:b] = r.vm, r.va, r.residual, r.omega
            frames.append(r.outcomes)
        outcomes = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()
        outcomes.index = idx
        return PeriodResult(idx, vm, va, res, om, outcomes)
