"""What the telemetry says about itself: branch outages seen on status points, and gaps where
every point of an RTU is missing at once (a communication outage)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from calibra.model.points import analog_points, status_points
from calibra.model.site import Site


@dataclass(frozen=True)
class Interval:
    what: str  # branch id or RTU name
    start: pd.Timestamp
    end: pd.Timestamp  # last snapshot inside the interval
    detail: str = ""

    def describe(self, tz: str) -> str:
        a, b = self.start.tz_convert(tz), self.end.tz_convert(tz)
        hours = (self.end - self.start).total_seconds() / 3600
        return f"{self.what}: {a:%a %Y-%m-%d %H:%M} to {b:%a %H:%M} ({hours:.1f} h){self.detail}"


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """Start and stop (inclusive) positions of runs of True."""
    if not mask.any():
        return []
    d = np.diff(np.r_[0, mask.astype(np.int8), 0])
    return list(zip(np.flatnonzero(d == 1), np.flatnonzero(d == -1) - 1, strict=True))


def branch_outages(site: Site) -> list[Interval]:
    """Intervals where a status point reads open (0)."""
    out = []
    snaps = site.snapshots
    for tag, row in status_points(site.points).iterrows():
        if tag not in snaps:
            continue
        values = snaps[tag].ffill().to_numpy(float)
        for a, b in _runs(values < 0.5):
            out.append(Interval(str(row["element"]), snaps.index[a], snaps.index[b],
                                f" open on {tag}"))
    return out


def rtu_gaps(site: Site, min_snapshots: int = 5) -> list[Interval]:
    """Intervals of at least ``min_snapshots`` where every analog point of an RTU is missing."""
    pts = analog_points(site.points)
    if "rtu" not in pts:
        return []
    snaps = site.snapshots
    out = []
    for rtu, group in pts.groupby(pts["rtu"].astype(str)):
        tags = [t for t in group.index if t in snaps]
        if not rtu or not tags:
            continue
        gone = snaps[tags].isna().all(axis=1).to_numpy()
        for a, b in _runs(gone):
            if b - a + 1 >= min_snapshots:
                out.append(Interval(rtu, snaps.index[a], snaps.index[b],
                                    f", all {len(tags)} points missing"))
    return out


def availability_lines(site: Site) -> list[str]:
    """Plain lines for the command line and the summary."""
    tz = site.timezone
    lines = [f"branch out of service: {i.describe(tz)}" for i in branch_outages(site)]
    lines += [f"RTU silent: {i.describe(tz)}" for i in rtu_gaps(site)]
    return lines
