"""ClusterEngine against the single-process LocalEngine on the sample site, to the bit.

Reference: LocalEngine (calibra.estimation.engine) fed the way the week review feeds it; the
issue's acceptance is identical results. Blocks never cross a UTC day, so day-sized tasks
must reproduce every block exactly.
"""

from __future__ import annotations

import shutil
import time

import numpy as np
import pandas as pd
import pytest

pytest.importorskip("distributed")

from calibra.cluster import ClusterEngine, ClusterError  # noqa: E402
from calibra.cluster.worker import SITE_ENTRIES  # noqa: E402
from calibra.estimation.week import SolverSettings  # noqa: E402
from calibra.ledger import Correction  # noqa: E402
from calibra.progress import Cancelled, Progress  # noqa: E402
from calibra.review_period import select_period  # noqa: E402
from tests.cluster.conftest import (  # noqa: E402
    END,
    LOCAL,
    SAMPLE,
    START,
    assert_same_period,
    estimate,
    local_period,
    set_aside_flags,
)


def test_screening_same_as_local_engine(client, sample_site):
    """Every 10th snapshot, blocks of 36, tolerance 1e-6: a screening round of the week review
    (calibra.diagnosis.evidence)."""
    local = local_period(sample_site)
    rows = np.arange(0, len(local.index), 10)
    set_aside = set_aside_flags(local)
    engine = ClusterEngine(client)
    here = estimate(LOCAL, local, rows, set_aside, 36, 1e-6)
    there = estimate(engine, select_period(sample_site, START, END), rows, set_aside, 36, 1e-6)
    assert_same_period(here, there)
    assert there.outcomes["converged"].all()


def test_full_resolution_same_as_local_engine(client, sample_site, local_full):
    """Every snapshot, blocks of 360, tolerance 1e-8: the review's final estimate."""
    local, rows, here = local_full
    there = estimate(ClusterEngine(client), select_period(sample_site, START, END), rows,
                     set_aside_flags(local), 360, 1e-8)
    assert_same_period(here, there)
    assert there.outcomes["converged"].all()


def test_rows_in_any_order_and_none(client, sample_site):
    local = local_period(sample_site)
    engine, period = ClusterEngine(client), select_period(sample_site, START, END)
    none = np.zeros(local.estimator.model.m, bool)
    rows = np.arange(len(local.index) - 1, -1, -25)  # backwards in time
    assert_same_period(estimate(LOCAL, local, rows, none, 36, 1e-6),
                       estimate(engine, period, rows, none, 36, 1e-6))
    empty = estimate(engine, period, np.zeros(0, int), none, 36, 1e-6)
    assert empty.vm.shape == (0, local.estimator.model.network.n_bus) and len(empty.index) == 0
    with pytest.raises(IndexError):
        estimate(engine, period, np.array([len(local.index)]), none, 36, 1e-6)


def test_software_corrections_reach_the_workers(client, sample_site):
    """Corrections with a time window: the workers apply them exactly as the client does."""
    fix = [Correction("NRC.110.T1H.MVAR", -1.0, 0.0),
           Correction("QLN.110.BRN1.MW", 1.0, -4.0,
                      valid_from=pd.Timestamp("2027-03-03 12:00", tz="UTC"),
                      valid_until=pd.Timestamp("2027-03-04 06:30", tz="UTC"))]
    local = local_period(sample_site, fix)
    rows = np.arange(0, len(local.index), 10)
    none = np.zeros(local.estimator.model.m, bool)
    engine = ClusterEngine(client)
    assert_same_period(estimate(LOCAL, local, rows, none, 36, 1e-6),
                       estimate(engine, select_period(sample_site, START, END, fix), rows, none,
                                36, 1e-6))
    # Without the corrections the workers' estimates differ (the check can fail).
    plain = estimate(engine, select_period(sample_site, START, END), rows, none, 36, 1e-6)
    assert not np.array_equal(plain.residual,
                              estimate(LOCAL, local, rows, none, 36, 1e-6).residual,
                              equal_nan=True)


def _copy_site(target):
    target.mkdir()
    for entry in SITE_ENTRIES:  # every name a site file may have; the sample has one point list
        src = SAMPLE / entry
        if not src.exists():
            continue
        if src.is_dir():
            shutil.copytree(src, target / entry)
        else:
            shutil.copy2(src, target / entry)
    return target


def test_workers_read_a_url_and_refuse_other_data(client, sample_site, tmp_path):
    """The workers read the site through an fsspec URL (here file://, as s3:// would be); a copy
    whose snapshots differ in one value is refused with the day named."""
    copy = _copy_site(tmp_path / "site")
    local = local_period(sample_site)
    period = select_period(sample_site, START, END)
    rows = np.arange(0, len(local.index), 10)
    none = np.zeros(local.estimator.model.m, bool)
    engine = ClusterEngine(client, worker_site=copy.as_uri())
    assert_same_period(estimate(LOCAL, local, rows, none, 36, 1e-6),
                       estimate(engine, period, rows, none, 36, 1e-6))

    day_file = copy / "snapshots" / "2027-03-04.parquet"  # local day: 03-03 23:00 to 03-04 23:00
    table = pd.read_parquet(day_file)
    table.loc[800, "VSM.220.EBB1.MW"] += 1.0  # 2027-03-04 12:20 UTC
    table.to_parquet(day_file)
    changed = ClusterEngine(client, worker_site=str(copy))
    with pytest.raises(ClusterError, match="2027-03-04"):
        estimate(changed, period, rows, none, 36, 1e-6)


def test_a_site_the_workers_cannot_read(client, sample_site, tmp_path):
    engine = ClusterEngine(client, worker_site=str(tmp_path / "none"))
    period = select_period(sample_site, START, END)
    none = np.zeros(period.model.m, bool)
    with pytest.raises(ClusterError, match="cannot load the site"):
        estimate(engine, period, np.arange(0, 100), none, 36, 1e-6)


def _calibra_tasks(client) -> list[str]:
    return client.run_on_scheduler(
        lambda dask_scheduler: [str(k) for k in dask_scheduler.tasks if "calibra-day" in str(k)])


def test_cancel_stops_outstanding_days(client, sample_site):
    engine, period = ClusterEngine(client), select_period(sample_site, START, END)
    seen = []
    progress = Progress(lambda done, total, msg: seen.append(done) or progress.cancel())
    with pytest.raises(Cancelled):
        engine.estimate(period, np.arange(len(period.index)), np.zeros(period.model.m, bool),
                        settings=SolverSettings(360, 1e-8, 0.99), progress=progress)
    assert len(seen) == 1 and seen[0] < len(period.index)
    deadline = time.monotonic() + 30
    while _calibra_tasks(client) and time.monotonic() < deadline:
        time.sleep(0.2)
    assert _calibra_tasks(client) == []
