"""Transformer ratios per snapshot from the site's tap-position points.

Each ``tap_position`` point gives its transformer's step number per snapshot; the step sets
the tapped side's ratio (:func:`calibra.model.tap_changers.step_ratio`), carried into the
estimate as the branch-state factor (:mod:`calibra.model.network`). A missing step holds the
last step received (as a historian holds a value, and as breaker status is held); before the
first step, and where a step gives no usable ratio, the network model's tap applies, and each
such use is reported, never silent.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from calibra.model.network import Network
from calibra.model.points import tap_points
from calibra.model.tap_changers import RATIO_RANGE, state_factor, step_ratio, tap_changers


@dataclass(frozen=True)
class TapFallback:
    """Snapshots where a tap-position point gave no usable step: the model's tap was used."""

    tag: str
    branch: str
    snapshots: int
    reason: str

    def describe(self) -> str:
        return (f"{self.tag} ({self.branch}): {self.snapshots:,} snapshots {self.reason}; the "
                "network model's tap ratio is used there")


def telemetered_steps(network: Network, points: pd.DataFrame,
                      snapshots: pd.DataFrame) -> dict[str, tuple[str, np.ndarray]]:
    """Per transformer with a tap-position point in ``snapshots``: (tag, steps per snapshot,
    held forward over missing values, NaN before the first). The first point of a transformer
    in the point list is used."""
    changers = tap_changers(network)
    out: dict[str, tuple[str, np.ndarray]] = {}
    pts = tap_points(points)
    for tag, row in pts[pts.index.isin(snapshots.columns)].iterrows():
        branch = str(row["element"])
        if branch in out or branch not in changers.index:
            continue
        out[branch] = (str(tag), snapshots[tag].ffill().to_numpy(float))
    return out


def tap_factors(network: Network, points: pd.DataFrame, snapshots: pd.DataFrame
                ) -> tuple[np.ndarray | None, list[TapFallback]]:
    """Branch-state factors (k × branches; None when the site has no tap-position point in the
    snapshots) and the fallbacks to the model's tap."""
    steps = telemetered_steps(network, points, snapshots)
    if not steps:
        return None, []
    changers = tap_changers(network)
    factors = np.ones((len(snapshots), network.n_branch))
    fallbacks: list[TapFallback] = []
    for branch, (tag, step) in steps.items():
        spec = changers.loc[branch]
        ratio = step_ratio(step, float(spec["tap_neutral"]), float(spec["tap_step_pct"]))
        unusable = np.isfinite(ratio) & ~((ratio > RATIO_RANGE[0]) & (ratio < RATIO_RANGE[1]))
        before = int(np.isnan(step).sum())
        if before:
            fallbacks.append(TapFallback(tag, branch, before, "before its first step value"))
        if unusable.any():
            fallbacks.append(TapFallback(
                tag, branch, int(unusable.sum()),
                f"at a step whose ratio leaves {RATIO_RANGE[0]:g}-{RATIO_RANGE[1]:g} (first "
                f"step {step[unusable][0]:g})"))
        usable = np.isfinite(ratio) & ~unusable
        b = int(network.branch_positions([branch])[0])
        factors[usable, b] = state_factor(network, branch, ratio[usable])
    return factors, fallbacks


def branch_states(status: np.ndarray, factors: np.ndarray | None) -> np.ndarray:
    """The branch state per snapshot: ``status`` as it is without tap telemetry, else float
    with the factors on the branches in service (0 out of service)."""
    if factors is None:
        return status
    return np.where(status, factors, 0.0)
