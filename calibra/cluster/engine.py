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
from collections.abc import Iterable
from pathlib import Path

import numpy as np
import pandas as pd

from calibra.cluster.period import ClusterError, correction_records, day_starts, prepare_period
from calibra.cluster.worker import DayJob, DayResult, estimate_day
from calibra.estimation.engine import LocalEngine
from calibra.estimation.week import PeriodResult
from calibra.ledger import Correction
from calibra.model.site import Site
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


class ClusterEngine:
    """Estimates a site's period on the workers of a Dask ``client``.

    ``site`` is the client's site (loaded from its folder); ``start``/``end`` and
    ``corrections`` select and correct the snapshots exactly as the review does
    (:func:`calibra.review_run.run_review`). ``worker_site`` is the site folder as the workers
    see it: a path or an fsspec URL (default: this folder's absolute path). ``progress``
    reports days as they finish and cancels the outstanding ones.
    """

    def __init__(self, client, site: Site, start: pd.Timestamp | None = None,
                 end: pd.Timestamp | None = None, corrections: Iterable[Correction] = (),
                 worker_site: str | None = None, progress: Progress | None = None,
                 retries: int = 2, held_out: dict[str, pd.Timestamp] | None = None):
        if worker_site is None and site.path is None:
            raise ValueError("a cluster review needs a site read from a folder the workers see")
        self.client = client
        self.corrections = list(corrections)
        self.location = str(worker_site) if worker_site else str(Path(site.path).resolve())
        self.progress = progress
        self.retries = retries
        self.held_out = dict(held_out or {})
        period = prepare_period(site, start, end, self.corrections, self.held_out)
        if len(period.index) == 0:
            raise ValueError("no snapshots in the chosen period")
        self._period = period
        self.index = period.index
        self._starts = day_starts(period.index)
        bounds = period.day_bounds()
        self._days = [(a, b, period.day_digest(a, b)) for a, b in bounds]
        self._site_digest = period.site_digest
        self.n_bus = period.estimator.model.network.n_bus  #: buses of the network
        self.m = period.estimator.model.m  #: analog points (measurements)
        self._records = correction_records(self.corrections)
        self._held = tuple(sorted((t, int(at.value)) for t, at in self.held_out.items()))
        self._token = uuid.uuid4().hex[:8]
        #: Days estimated per worker address (the last call), for reports and tests.
        self.workers_used: dict[str, int] = {}

    # ------------------------------------------------------------------ PeriodEngine
    def estimate(self, rows: np.ndarray, set_aside: np.ndarray, max_block: int,
                 tolerance: float, confidence: float, progress=None,
                 by_day: bool = True) -> PeriodResult:
        """Estimate snapshots ``rows`` (positions in the period) without the set-aside points.

        ``by_day=False`` (a thin sample whose blocks cross days, such as the screening's) is
        estimated here, from the period this client prepared: a handful of snapshots per day
        would cost the cluster more in transfers than it saves."""
        rows = np.asarray(rows, dtype=np.int64)
        if not by_day:
            period = self._period
            return LocalEngine(period.estimator, period.z, period.in_service, period.index
                               ).estimate(rows, set_aside, max_block, tolerance, confidence,
                                          progress or self.progress, by_day=False)
        k = len(self.index)
        if rows.size and (rows.min() < 0 or rows.max() >= k):
            raise IndexError(f"snapshot positions must lie in 0..{k - 1}")
        set_aside = np.asarray(set_aside, dtype=bool)
        if set_aside.shape != (self.m,):
            raise ValueError(f"set_aside needs one flag per point ({self.m})")
        segments = self._segments(rows)
        jobs = [self._job(rows[a:b], day, set_aside, max_block, tolerance, confidence)
                for a, b, day in segments]
        results = self._run(jobs, [b - a for a, b, _ in segments], progress or self.progress)
        return self._assemble(rows, segments, results)

    # ------------------------------------------------------------------ pieces
    def _segments(self, rows: np.ndarray) -> list[tuple[int, int, int]]:
        """Maximal runs of consecutive requested rows within one day: (first, end, day number).

        The local engine breaks blocks wherever the day changes between consecutive rows, so
        these segments hold exactly its blocks, whatever the order of ``rows``."""
        if rows.size == 0:
            return []
        day = np.searchsorted(self._starts, rows, side="right") - 1
        cut = np.flatnonzero(np.r_[True, day[1:] != day[:-1]])
        ends = np.r_[cut[1:], rows.size]
        return [(int(a), int(b), int(day[a])) for a, b in zip(cut, ends, strict=True)]

    def _job(self, rows: np.ndarray, day: int, set_aside: np.ndarray, max_block: int,
             tolerance: float, confidence: float) -> DayJob:
        first, end, digest = self._days[day]
        return DayJob(self.location, int(self.index[0].value), int(self.index[-1].value),
                      self._records, self._site_digest, first, end, digest, rows, set_aside,
                      int(max_block), float(tolerance), float(confidence), self._held)

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

    def _assemble(self, rows: np.ndarray, segments, results: list[DayResult]) -> PeriodResult:
        k = rows.size
        idx = self.index[rows]
        vm = np.full((k, self.n_bus), np.nan, np.float32)
        va = np.full((k, self.n_bus), np.nan, np.float32)
        res = np.full((k, self.m), np.nan, np.float32)
        om = np.full((k, self.m), np.nan, np.float32)
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
