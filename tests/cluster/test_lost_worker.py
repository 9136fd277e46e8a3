"""A worker killed (SIGKILL) while it estimates a day: the scheduler runs the day again on a
worker that is alive, and the result is complete, each day once, and equal to the bit to the
single-process LocalEngine (reference; the issue's acceptance). Dask's nanny restarts the
killed worker process."""

from __future__ import annotations

import os
import signal

import numpy as np
import pytest

pytest.importorskip("distributed")

from calibra.cluster import ClusterEngine  # noqa: E402
from calibra.estimation.week import SolverSettings  # noqa: E402
from calibra.progress import Progress  # noqa: E402
from calibra.review_period import select_period  # noqa: E402
from tests.cluster.conftest import (  # noqa: E402
    END,
    START,
    assert_same_period,
    estimate,
    running_cluster,
    set_aside_flags,
)


@pytest.fixture
def own_client(local_review):
    """A cluster of its own: this test kills one of its workers."""
    with running_cluster(2) as client:
        yield client


@pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="needs SIGKILL (POSIX)")
def test_worker_killed_mid_run(own_client, sample_site, local_full):
    client = own_client
    local, rows, reference = local_full
    set_aside = set_aside_flags(local)
    pids = client.run(os.getpid)
    engine, period = ClusterEngine(client), select_period(sample_site, START, END)
    # Warm the workers (each reads the site once) so the kill lands in an estimate.
    estimate(engine, period, np.arange(0, len(period.index), 60), set_aside, 36, 1e-6)
    killed: dict[str, list] = {}

    def kill_a_busy_worker(done: int, total: int, message: str) -> None:
        if killed:
            return
        busy = {w: keys for w, keys in client.processing().items() if keys}
        if busy:
            victim = sorted(busy)[0]
            killed[victim] = list(busy[victim])
            os.kill(pids[victim], signal.SIGKILL)

    result = engine.estimate(period, rows, set_aside, settings=SolverSettings(360, 1e-8, 0.99),
                             progress=Progress(kill_a_busy_worker))
    assert killed, "no worker was busy after the first day finished"
    victim = next(iter(killed))
    assert victim not in client.scheduler_info()["workers"]
    # The killed worker's day was estimated by a live worker; each day placed once.
    assert victim not in engine.workers_used
    assert sum(engine.workers_used.values()) == 3  # three UTC days in the window
    assert len(result.index) == len(rows) and result.index.is_unique
    assert_same_period(reference, result)
