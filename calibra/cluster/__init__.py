"""Reviews on a Dask cluster (optional extra ``calibra[cluster]``).

The period is cut into days; each day is estimated on a worker that reads the site folder itself
(:mod:`calibra.cluster.worker`); the client puts the days back together and runs the diagnosis
as usual (:class:`ClusterEngine`, handed to
:func:`calibra.review_run.run_review`). Importing this package does not import Dask: only running on
a cluster needs it.
"""

from calibra.cluster.connect import (
    check_workers,
    cluster_client,
    parse_cluster_address,
    start_local_cluster,
)
from calibra.cluster.engine import ClusterEngine
from calibra.cluster.period import ClusterError

__all__ = [
    "ClusterEngine", "ClusterError", "check_workers", "cluster_client", "parse_cluster_address",
    "start_local_cluster",
]
