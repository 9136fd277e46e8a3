"""Counts and spans of a loaded site, and the same in lines for people."""

from __future__ import annotations

import numpy as np
import pandas as pd

from calibra.model.points import QUANTITIES, REPORTING_COLUMNS
from calibra.model.site import Site


def summarize(site: Site) -> dict:
    """Counts and spans of a loaded site, for the command line and the GUI.

    Keys: ``name``, ``timezone``, ``buses``, ``branches``, ``branches_in_service``,
    ``substations``, ``zero_injection_buses``, ``points``, ``points_by_quantity``
    (quantity → count, every quantity listed), ``stated`` (``deadband`` and ``resolution`` →
    the number of points that state one), ``snapshots``, ``first_snapshot`` and
    ``last_snapshot`` (UTC Timestamps or None), ``typical_interval`` (median spacing,
    Timedelta or None), ``missing_fraction`` (of all point × snapshot cells),
    ``missing_by_point`` (tag → number of missing snapshots), ``errors``, ``warnings``.
    """
    net, points, snaps = site.network, site.points, site.snapshots
    by_quantity = points["quantity"].value_counts()
    missing = snaps.isna().sum(axis=0) if len(snaps.index) else pd.Series(0, index=points.index)
    cells = snaps.size
    index = snaps.index
    return {
        "name": site.name,
        "timezone": site.timezone,
        "buses": net.n_bus,
        "branches": net.n_branch,
        "branches_in_service": int(net.default_in_service().sum()),
        "substations": int(net.buses["substation"].nunique()),
        "zero_injection_buses": int(net.buses["zero_injection"].sum()),
        "points": len(points),
        "points_by_quantity": {q: int(by_quantity.get(q, 0)) for q in QUANTITIES},
        "stated": {c: int(points[c].notna().sum()) if c in points else 0
                   for c in REPORTING_COLUMNS},
        "snapshots": len(index),
        "first_snapshot": index[0] if len(index) else None,
        "last_snapshot": index[-1] if len(index) else None,
        "typical_interval": (
            pd.Timedelta(np.median(np.diff(index.asi8)), unit="ns") if len(index) > 1 else None
        ),
        "missing_fraction": float(missing.sum() / cells) if cells else 0.0,
        "missing_by_point": {str(t): int(n) for t, n in missing.items()},
        "errors": len(site.errors),
        "warnings": len(site.warnings),
    }


def site_summary_lines(site: Site) -> list[str]:
    """What was loaded, in lines for people: the command line prints them, the desktop
    application shows them in its Site tab."""
    s = summarize(site)
    quantities = ", ".join(f"{q} {n}" for q, n in s["points_by_quantity"].items() if n)
    lines = [
        f"site: {s['name']} (timezone {s['timezone']})",
        f"network: {s['buses']} buses in {s['substations']} substations, "
        f"{s['zero_injection_buses']} zero-injection; {s['branches']} branches, "
        f"{s['branches_in_service']} in service",
        f"points: {s['points']}" + (f" ({quantities})" if quantities else ""),
    ]
    if any(s["stated"].values()):
        stated = ", ".join(f"{c} for {n}" for c, n in s["stated"].items())
        lines.append(f"stated in the point list: {stated} (the others read from the data)")
    if s["snapshots"]:
        step = s["typical_interval"]
        lines.append(
            f"snapshots: {s['snapshots']} from {s['first_snapshot']:%Y-%m-%d %H:%M} to "
            f"{s['last_snapshot']:%Y-%m-%d %H:%M} UTC"
            + (f", typically every {_duration(step)}" if step is not None else "")
            + f"; {100 * s['missing_fraction']:.1f}% of values missing"
        )
        worst = sorted(s["missing_by_point"].items(), key=lambda kv: -kv[1])[:5]
        worst = [(t, n) for t, n in worst if n]
        if worst:
            lines.append(
                "most missing: " + ", ".join(
                    f"{t} {100 * n / s['snapshots']:.0f}%" for t, n in worst
                )
            )
    else:
        lines.append("snapshots: none")
    return lines


def _duration(step: pd.Timedelta) -> str:
    seconds = step.total_seconds()
    if seconds % 3600 == 0:
        return f"{seconds / 3600:g} h"
    if seconds % 60 == 0:
        return f"{seconds / 60:g} min"
    return f"{seconds:g} s"
