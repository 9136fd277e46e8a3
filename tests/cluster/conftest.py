"""Shared fixtures of the cluster tests: a window of the sample site, its single-machine review
(the reference every cluster result must equal) and a two-worker cluster on 127.0.0.1.

Dask is imported inside the fixtures, so without the ``cluster`` extra the test modules skip
themselves (``pytest.importorskip``) instead of failing to collect.
"""

from __future__ import annotations

from contextlib import contextmanager
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from calibra.cluster import start_local_cluster
from calibra.estimation.engine import LocalEngine
from calibra.estimation.measurement_model import MeasurementModel
from calibra.estimation.period import PreparedPeriod
from calibra.estimation.topology import checked_topology
from calibra.estimation.week import SolverSettings
from calibra.estimation.wls import Estimator
from calibra.io import load_site
from calibra.ledger import apply_corrections
from calibra.review_run import run_review

SAMPLE = Path(__file__).resolve().parents[2] / "sample_site"
#: Two local days of the sample week (Wednesday and Thursday, Europe/Oslo): three UTC days in
#: part, with the seeded drift (onset Wednesday 13:20 UTC) and the frozen value (Thursday
#: 09:17 UTC) inside, so onsets are compared too.
START = pd.Timestamp("2027-03-02 23:00", tz="UTC")
END = pd.Timestamp("2027-03-04 22:59", tz="UTC")


@contextmanager
def running_cluster(n_workers: int = 2):
    """A client of a LocalCluster of single-threaded worker processes on 127.0.0.1 (no
    dashboard), every worker up; closed afterwards."""
    from distributed import Client

    cluster = start_local_cluster(n_workers)
    try:
        with Client(cluster) as client:
            client.wait_for_workers(n_workers, timeout=60)
            yield client
    finally:
        cluster.close()


@pytest.fixture(scope="session")
def sample_site():
    return load_site(SAMPLE)


@pytest.fixture(scope="session")
def local_review(sample_site):
    """The reference: the window reviewed on this machine, before any cluster exists (the
    local engine forks its block workers; a process with Dask's threads should not fork)."""
    return run_review(sample_site, start=START, end=END)


@pytest.fixture(scope="session")
def client(local_review):
    with running_cluster(2) as client:
        yield client


def local_period(site, corrections=()) -> PreparedPeriod:
    """The window prepared for a single-process LocalEngine, its inputs built the way the week
    review builds them (calibra.diagnosis.evidence.gather_evidence), independently of
    calibra.cluster and calibra.review_period."""
    snaps = site.snapshots.loc[START:END]
    if corrections:
        snaps = apply_corrections(snaps, corrections, missing="ignore")
    model = MeasurementModel.from_points(site.network, site.points)
    values = snaps.reindex(columns=model.tags).to_numpy(float)
    in_service, _ = checked_topology(site, snaps)
    return PreparedPeriod(site, snaps.index, Estimator(model), values.astype(np.float32),
                          model.to_per_unit(values), in_service, corrections=tuple(corrections))


#: The reference engine: this machine, one process.
LOCAL = LocalEngine(workers=1)


def estimate(engine, period, rows, set_aside, max_block, tolerance):
    """``engine.estimate`` with the review's confidence level."""
    return engine.estimate(period, rows, set_aside,
                           settings=SolverSettings(max_block, tolerance, 0.99))


#: Points set aside in the engine checks: two known faulty ones (truth faults 8 and 9), as a
#: screening round would set them aside.
SET_ASIDE = ("BRN.110.MRG1.MW", "QLN.110.BRN1.MW")


def set_aside_flags(period) -> np.ndarray:
    return np.isin(period.model.tags, SET_ASIDE)


@pytest.fixture(scope="session")
def local_full(sample_site):
    """The window estimated at full resolution by one local process: (period, rows, result)."""
    period = local_period(sample_site)
    rows = np.arange(len(period.index))
    return period, rows, estimate(LOCAL, period, rows, set_aside_flags(period), 360, 1e-8)


def assert_same_period(a, b) -> None:
    """Two PeriodResults equal to the bit (NaN where NaN)."""
    assert a.index.equals(b.index)
    for name in ("vm", "va", "residual", "omega"):
        x, y = getattr(a, name), getattr(b, name)
        assert x.dtype == y.dtype and x.shape == y.shape, name
        assert np.array_equal(x, y, equal_nan=True), name
    pd.testing.assert_frame_equal(a.outcomes, b.outcomes, check_exact=True)
