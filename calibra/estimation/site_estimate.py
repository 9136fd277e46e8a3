"""Estimate the snapshots of a loaded site: telemetry to per unit, topology from status points."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from calibra.estimation.batch import BatchEstimate, estimate_many
from calibra.estimation.model import MeasurementModel
from calibra.estimation.wls import Estimator, EstimatorOptions
from calibra.model.points import status_points
from calibra.model.site import Site
from calibra.progress import Progress


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
    flows = pts[pts["quantity"].isin(("p_flow", "q_flow")) & pts.index.isin(snaps.columns)]
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
        limit = (meters["accuracy_pct"].astype(float) / 100
                 * meters["full_scale"].astype(float)).to_numpy()
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


@dataclass
class SiteEstimate:
    """Estimates of a site's snapshots with the measurement model they were made with."""

    model: MeasurementModel
    batch: BatchEstimate
    in_service: np.ndarray

    def summary(self) -> dict:
        out = self.batch.outcomes
        conv = out["converged"]
        res = {
            "snapshots": len(out),
            "converged": int(conv.sum()),
            "not_converged": int((~conv).sum()),
            "not_fully_observable": int((~out["observable"]).sum()),
            "mean_iterations": float(out.loc[conv, "iterations"].mean()) if conv.any() else np.nan,
        }
        if "chi2_passed" in out:
            passed = out.loc[conv, "chi2_passed"].astype(bool)
            res["chi2_failed"] = int((~passed).sum())
        reasons = out.loc[~conv, "reason"].value_counts()
        res["failure_reasons"] = reasons.to_dict()
        return res


def estimate_site(
    site: Site,
    options: EstimatorOptions | None = None,
    start: pd.Timestamp | None = None,
    end: pd.Timestamp | None = None,
    analyse: bool = True,
    confidence: float = 0.99,
    progress: Progress | None = None,
) -> SiteEstimate:
    """Estimate every snapshot of ``site`` between ``start`` and ``end`` (inclusive)."""
    snaps = site.snapshots
    if start is not None or end is not None:
        snaps = snaps.loc[start:end]
    model = MeasurementModel.from_points(site.network, site.points)
    values = snaps.reindex(columns=model.tags).to_numpy(float)
    z = model.to_per_unit(values)
    in_service = topology_per_snapshot(site, snaps)
    batch = estimate_many(Estimator(model, options), z, in_service, snaps.index, analyse,
                          confidence, progress)
    return SiteEstimate(model, batch, in_service)
