"""Branch topology per snapshot from a site's status points, cross-checked with its flow meters."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from calibra.model.points import FLOW_QUANTITIES, class_limit, status_points
from calibra.model.site import Site


def topology_per_snapshot(site: Site, snapshots: pd.DataFrame | None = None) -> np.ndarray:
    """Branch in-service flags per snapshot (k × branches) from the ``branch_status`` points.

    A branch is out of service in a snapshot when any of its status points reads 0. A missing
    status value holds the last value received (as a historian does); before the first value the
    network model's ``in_service`` applies.
    """
    net = site.network
    snaps = site.snapshots if snapshots is None else snapshots
    k = len(snaps)
    status = np.tile(net.default_in_service(), (k, 1))
    stat = status_points(site.points)
    stat = stat[stat.index.isin(snaps.columns)]
    if stat.empty:
        return status
    pos = net.branch_positions(stat["element"].astype(str))
    values = snaps[stat.index].ffill().to_numpy(float)
    for j, b in enumerate(pos):
        col = values[:, j]
        known = np.isfinite(col)
        status[known, b] &= col[known] > 0.5
    return status


@dataclass(frozen=True)
class StatusConflict:
    """A status point reads open while the branch's own flow meters show power flowing."""

    branch: str
    status_tag: str
    start: pd.Timestamp
    end: pd.Timestamp
    snapshots: int
    flow_tags: tuple[str, ...]

    def describe(self, tz: str) -> str:
        return (f"{self.status_tag} reads open but {', '.join(self.flow_tags)} show flow on "
                f"{self.branch}: {self.snapshots} snapshots from "
                f"{self.start.tz_convert(tz):%a %Y-%m-%d %H:%M} to "
                f"{self.end.tz_convert(tz):%a %H:%M}; the branch is taken as closed there")


def checked_topology(site: Site, snapshots: pd.DataFrame | None = None,
                     factor: float = 5.0) -> tuple[np.ndarray, list[StatusConflict]]:
    """Branch status per snapshot (as :func:`topology_per_snapshot`), cross-checked with the
    branch's own P/Q meters: where a status point says open but a flow meter on that branch
    reads more than ``factor`` × its accuracy-class limit, the status point is the likelier
    error (a flow cannot pass an open branch), so the branch is taken as closed there and the
    conflict is reported. Without a flow meter on the branch the status point is trusted.
    The rule is common practice in topology processing (no source)."""
    snaps = site.snapshots if snapshots is None else snapshots
    status = topology_per_snapshot(site, snaps)
    net = site.network
    pts = site.points
    flows = pts[pts["quantity"].isin(FLOW_QUANTITIES) & pts.index.isin(snaps.columns)]
    conflicts: list[StatusConflict] = []
    stat = status_points(pts)
    for tag, row in stat[stat.index.isin(snaps.columns)].iterrows():
        branch = str(row["element"])
        b = net.branches.index.get_loc(branch)
        says_open = snaps[tag].ffill().to_numpy(float) < 0.5
        if not says_open.any():
            continue
        meters = flows[flows["element"].astype(str) == branch]
        if meters.empty:
            continue
        limit = class_limit(meters).to_numpy()
        values = np.abs(snaps[meters.index].to_numpy(float))
        flowing = np.nan_to_num(values > factor * limit[None, :]).any(axis=1)
        clash = says_open & flowing
        if not clash.any():
            continue
        status[clash, b] = True
        idx = np.flatnonzero(clash)
        conflicts.append(StatusConflict(branch, str(tag), snaps.index[idx[0]],
                                        snaps.index[idx[-1]], int(idx.size),
                                        tuple(str(t) for t in meters.index)))
    return status, conflicts
