"""What runs on a cluster worker: read the site itself, prepare the period once, estimate a day.

A worker receives only small jobs (where the site is, the period's bounds, the corrections as
plain data, the day's snapshot positions and the points set aside). It reads the site folder
itself — a path it can see, or an fsspec URL such as ``s3://bucket/site`` that it copies to a
temporary folder — loading only the period's snapshots, and keeps the prepared period (per-unit
values, topology, estimator) in memory for the next jobs of the same review. The cache key holds
the size and modification time of every site file, so a changed folder is read again.
"""

from __future__ import annotations

import os
import shutil
import tempfile
import threading
from collections import OrderedDict
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

import calibra
from calibra.cluster.period import (
    ClusterError,
    CorrectionRecord,
    DayDigests,
    corrections_from_records,
)
from calibra.estimation.engine import LocalEngine
from calibra.estimation.runtime import tune_allocator
from calibra.estimation.week import SolverSettings
from calibra.io import load_site
from calibra.io.point_list import POINT_LIST_FILES
from calibra.io.site_config import SITE_FILE
from calibra.io.site_folder import NETWORK_DIR
from calibra.io.snapshots import SNAPSHOT_DIR
from calibra.model.site import SiteLoadError
from calibra.review_period import select_period

#: What a worker reads of a site folder (the ledger and anything else is left alone).
SITE_ENTRIES = (SITE_FILE, *POINT_LIST_FILES, NETWORK_DIR, SNAPSHOT_DIR)
#: Prepared periods kept per worker process (a month of IEEE 118 is about 400 MB each).
MAX_CACHED = 2

_CACHE: OrderedDict[tuple, DayDigests] = OrderedDict()
_LOCK = threading.Lock()


@dataclass(frozen=True)
class DayJob:
    """One day of a period to estimate (every field small: no snapshot values)."""

    location: str  # site folder path or fsspec URL, as the workers see it
    start_ns: int  # first and last snapshot of the period (UTC ns)
    end_ns: int
    corrections: tuple[CorrectionRecord, ...]
    site_digest: str
    day_first: int  # the day's positions in the period: day_first .. day_end − 1
    day_end: int
    day_digest: str
    rows: np.ndarray  # snapshot positions in the period to estimate (all in this day)
    set_aside: np.ndarray  # bool per point
    settings: SolverSettings
    #: Points judged only after a time (a repair inside the period): (tag, UTC ns) pairs.
    held_out: tuple[tuple[str, int], ...] = ()


@dataclass
class DayResult:
    """The estimates of one job's rows (arrays as in :class:`~calibra.estimation.week.
    PeriodResult`)."""

    vm: np.ndarray
    va: np.ndarray
    residual: np.ndarray
    omega: np.ndarray
    outcomes: pd.DataFrame
    worker: str


def is_url(location: str) -> bool:
    """Whether a site location is an fsspec URL rather than a path."""
    return "://" in location


def worker_name() -> str:
    """This worker's address, for messages."""
    try:
        from distributed import get_worker

        return str(get_worker().address)
    except (ImportError, ValueError):
        return f"process {os.getpid()}"


def worker_version() -> str:
    """The calibra version installed where this runs (the client compares it with its own)."""
    return calibra.__version__


def _url_files(location: str) -> tuple[object, str, list[tuple[str, str, dict]]]:
    """(filesystem, root, [(relative path, remote path, info)]) of the site entries at a URL."""
    import fsspec

    fs, root = fsspec.core.url_to_fs(location)
    root = root.rstrip("/")
    files = []
    for entry in SITE_ENTRIES:
        path = f"{root}/{entry}"
        if not fs.exists(path):
            continue
        for remote, info in sorted(fs.find(path, detail=True).items()):
            files.append((remote[len(root) + 1:] if remote.startswith(root) else entry,
                          remote, info))
    return fs, root, files


def site_fingerprint(location: str) -> tuple:
    """Size and modification time (or ETag) of every file the worker reads."""
    if is_url(location):
        _, _, files = _url_files(location)
        return tuple((rel, info.get("size"), str(info.get("mtime") or info.get("LastModified")
                                                  or info.get("ETag") or info.get("created")))
                     for rel, _, info in files)
    root = Path(location)
    out = []
    for entry in SITE_ENTRIES:
        path = root / entry
        found = [path] if path.is_file() else sorted(p for p in path.rglob("*") if p.is_file())
        for p in found:
            st = p.stat()
            out.append((p.relative_to(root).as_posix(), st.st_size, st.st_mtime_ns))
    return tuple(out)


def _load(location: str, start: pd.Timestamp, end: pd.Timestamp):
    """Load the site at ``location`` with the snapshots from ``start`` to ``end`` only (a URL
    is copied to a temporary folder first)."""
    if not is_url(location):
        return load_site(location, start=start, end=end)
    fs, _, files = _url_files(location)
    folder = tempfile.mkdtemp(prefix="calibra-site-")
    try:
        for rel, remote, _ in files:
            target = Path(folder) / rel
            target.parent.mkdir(parents=True, exist_ok=True)
            fs.get_file(remote, str(target))
        return load_site(folder, start=start, end=end)
    finally:
        shutil.rmtree(folder, ignore_errors=True)


def prepared_period(job: DayJob) -> DayDigests:
    """The job's period (with its digests), from this worker's cache or read from the site."""
    key = (job.location, site_fingerprint(job.location), job.start_ns, job.end_ns,
           job.corrections, job.held_out)
    with _LOCK:
        tune_allocator()
        hit = _CACHE.get(key)
        if hit is not None:
            _CACHE.move_to_end(key)
            return hit
        start = pd.Timestamp(job.start_ns, tz="UTC")
        end = pd.Timestamp(job.end_ns, tz="UTC")
        try:
            site = _load(job.location, start, end)
        except SiteLoadError as exc:
            first = "; ".join(str(p) for p in exc.problems[:3])
            raise ClusterError(f"worker {worker_name()} cannot load the site at "
                               f"{job.location}: {first}") from None
        except OSError as exc:
            raise ClusterError(f"worker {worker_name()} cannot read the site at "
                               f"{job.location}: {exc}") from None
        held = {tag: pd.Timestamp(ns, tz="UTC") for tag, ns in job.held_out}
        if site.snapshots.loc[start:end].empty:
            raise ClusterError(f"worker {worker_name()} reading {job.location}: the snapshots "
                               f"of {start:%Y-%m-%d} (UTC) differ from the client's; every "
                               "worker must see the same site folder")
        prepared = DayDigests(select_period(site, start, end,
                                            corrections_from_records(job.corrections), held))
        _CACHE[key] = prepared
        while len(_CACHE) > MAX_CACHED:
            _CACHE.popitem(last=False)
        return prepared


def _check(job: DayJob, prepared: DayDigests) -> None:
    where = f"worker {worker_name()} reading {job.location}"
    period = prepared.period
    if prepared.site_digest != job.site_digest:
        raise ClusterError(f"{where}: the network or point list differs from the client's; "
                           "every worker must see the same site folder")
    k = len(period.index)
    if job.day_end > k or prepared.day(job.day_first, job.day_end) != job.day_digest:
        day = pd.Timestamp(job.start_ns, tz="UTC") if job.day_first >= k else \
            period.index[job.day_first]
        raise ClusterError(f"{where}: the snapshots of {day:%Y-%m-%d} (UTC) differ from the "
                           "client's; every worker must see the same site folder")
    if job.rows.size and (job.rows.min() < job.day_first or job.rows.max() >= job.day_end):
        raise ValueError("job rows outside their day")


def estimate_day(job: DayJob) -> DayResult:
    """Estimate the job's snapshots exactly as :class:`~calibra.estimation.engine.LocalEngine`
    does (one process: the cluster gives the parallelism)."""
    prepared = prepared_period(job)
    _check(job, prepared)
    result = LocalEngine(workers=1).estimate(
        prepared.period, job.rows, job.set_aside, settings=job.settings)
    return DayResult(result.vm, result.va, result.residual, result.omega, result.outcomes,
                     worker_name())
