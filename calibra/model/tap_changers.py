"""On-load tap changers of transformer branches: step number to ratio, and to branch state.

A transformer branch may carry, in the optional columns of
:data:`~calibra.model.network.TAP_CHANGER_COLUMNS`, the step size in % of the nominal ratio, the
neutral step and the tapped side. At step ``s`` the tapped side's ratio is
``1 + (s − neutral) × step_pct / 100`` (common practice, no source). In the network model's
from-side convention (:mod:`calibra.model.network`) that ratio is

- tapped on the from side: the branch's from-side ratio ``tap`` itself (the branch-state factor
  is ratio / model tap);
- tapped on the to side: an ideal ratio:1 transformer at the to bus (the factor is the ratio;
  the model's own ``tap`` stays as the fixed from-side ratio), which is the pypower branch
  with its two ends swapped and this tap (checked in the tests).
"""

from __future__ import annotations

from enum import StrEnum

import numpy as np
import pandas as pd

from calibra.model.network import TAP_CHANGER_COLUMNS, Network

#: A step whose ratio leaves this range is not a position of any tap changer (a wrong value
#: in the data, not a setting; REFERENCES.md: ±10-20 % spans, common practice, no source).
RATIO_RANGE = (0.5, 1.5)


class TappedSide(StrEnum):
    """The winding the tap changer sits on, as the branch table names it."""

    FROM = "from"
    TO = "to"


def step_ratio(step, neutral: float, step_pct: float):
    """Ratio of the tapped side at step ``step`` (scalar or array)."""
    return 1.0 + (np.asarray(step, float) - neutral) * step_pct / 100.0


def ratio_step(ratio, neutral: float, step_pct: float):
    """The (fractional) step number whose ratio is ``ratio``: the inverse of :func:`step_ratio`."""
    return neutral + (np.asarray(ratio, float) - 1.0) * 100.0 / step_pct


def tap_changers(network: Network) -> pd.DataFrame:
    """The branches with a tap changer (a step size given), indexed by branch id, with columns
    ``tap_step_pct``, ``tap_neutral`` (0 when empty) and ``tap_side`` ('from' when empty)."""
    br = network.branches
    if "tap_step_pct" not in br:
        return pd.DataFrame(columns=TAP_CHANGER_COLUMNS).rename_axis("branch")
    table = br.reindex(columns=TAP_CHANGER_COLUMNS).copy()
    table = table[pd.to_numeric(table["tap_step_pct"], errors="coerce").notna()]
    table["tap_step_pct"] = table["tap_step_pct"].astype(float)
    table["tap_neutral"] = pd.to_numeric(table["tap_neutral"], errors="coerce").fillna(0.0)
    side = table["tap_side"].fillna("").astype(str).str.strip().str.lower()
    table["tap_side"] = side.where(side != "", TappedSide.FROM.value)
    return table


def model_side_ratio(network: Network, branch: str) -> float:
    """The tapped side's ratio the model holds: the from-side ``tap`` for a from-side changer,
    1 for a to-side one (the model's ratio there is the nominal)."""
    row = network.branches.loc[branch]
    if str(row.get("tap_side", "") or "").strip().lower() == TappedSide.TO:
        return 1.0
    tap = float(row["tap"]) if pd.notna(row["tap"]) and float(row["tap"]) != 0 else 1.0
    return tap


def state_factor(network: Network, branch: str, ratio) -> np.ndarray:
    """The branch-state factor that sets the tapped side of ``branch`` to ``ratio``."""
    return np.asarray(ratio, float) / model_side_ratio(network, branch)
