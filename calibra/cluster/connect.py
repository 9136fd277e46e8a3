"""Reaching a cluster: ``local:N`` for worker processes on this machine, or a scheduler address.

A review runs through it with :class:`~calibra.cluster.engine.ClusterEngine` handed to
:func:`calibra.review_run.run_review` by the caller (the command line)."""

from __future__ import annotations

import logging
import re
from collections.abc import Iterator
from contextlib import contextmanager

import calibra
from calibra.cluster.engine import distributed_module
from calibra.cluster.period import ClusterError
from calibra.cluster.worker import worker_version

_LOCAL = re.compile(r"local:(\d+)")
_REMOTE = re.compile(r"(tcp|tls|ucx|inproc|ws|wss)://\S+|[A-Za-z0-9_.\-\[\]:]+:\d+")
#: Seconds to wait for a scheduler and for its first worker.
CONNECT_SECONDS = 30


def parse_cluster_address(text: str) -> tuple[str, int | str]:
    """("local", N) for ``local:N`` (N worker processes here), ("remote", address) for a
    scheduler such as ``tcp://10.0.0.5:8786``; ValueError otherwise."""
    text = text.strip()
    local = _LOCAL.fullmatch(text)
    if local:
        n = int(local.group(1))
        if not 1 <= n <= 256:
            raise ValueError(f"local:N needs 1 to 256 worker processes, not {n}")
        return "local", n
    if _REMOTE.fullmatch(text):
        return "remote", text
    raise ValueError(f"not a cluster address: {text!r} (use local:N or tcp://HOST:PORT)")


def check_workers(client) -> dict[str, str]:
    """Every worker's calibra version; ClusterError when there are none or a version differs
    from this one (a different estimator could give different results)."""
    try:
        client.wait_for_workers(1, timeout=CONNECT_SECONDS)
    except TimeoutError:
        raise ClusterError(f"no worker joined the scheduler within {CONNECT_SECONDS} s") \
            from None
    try:
        versions = client.run(worker_version)
    except Exception as exc:  # noqa: BLE001 - any failure here means calibra is unusable there
        raise ClusterError(f"a worker cannot run calibra ({type(exc).__name__}: {exc}); "
                           "install the same calibra version on every worker") from None
    other = {w: v for w, v in versions.items() if v != calibra.__version__}
    if other:
        listed = ", ".join(f"{w} has {v}" for w, v in sorted(other.items()))
        raise ClusterError(f"workers run another calibra version than this {calibra.__version__}"
                           f": {listed}")
    return versions


def start_local_cluster(n_workers: int):
    """A ``distributed.LocalCluster`` of ``n_workers`` single-threaded worker processes that
    listens on 127.0.0.1 only, without a dashboard (the scheduler's health endpoint takes a
    free port instead of 8787, so several clusters can run side by side)."""
    distributed = distributed_module()
    return distributed.LocalCluster(
        n_workers=n_workers, processes=True, threads_per_worker=1, host="127.0.0.1",
        dashboard_address=None, silence_logs=logging.ERROR,
        scheduler_kwargs={"dashboard": False, "dashboard_address": "127.0.0.1:0"})


@contextmanager
def cluster_client(address: str) -> Iterator[object]:
    """A ``distributed.Client`` for ``address``: ``local:N`` starts N single-threaded worker
    processes on 127.0.0.1 for the duration (no dashboard); otherwise the scheduler at the
    address is used. The workers are checked with :func:`check_workers`."""
    kind, value = parse_cluster_address(address)
    distributed = distributed_module()
    if kind == "local":
        cluster = start_local_cluster(int(value))
        try:
            with distributed.Client(cluster) as client:
                check_workers(client)
                yield client
        finally:
            cluster.close()
        return
    try:
        client = distributed.Client(str(value), timeout=CONNECT_SECONDS)
    except OSError as exc:
        raise ClusterError(f"cannot reach the scheduler at {value}: {exc}") from None
    with client:
        check_workers(client)
        yield client
