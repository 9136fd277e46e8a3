"""The point list: what each telemetered analog or status point measures, and how well.

A point list is a DataFrame indexed by ``tag`` with the columns of :data:`POINT_COLUMNS`.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

#: Quantities a point can measure, with the element it refers to and the units allowed.
QUANTITIES: dict[str, dict] = {
    "p_flow": {"element": "branch", "end": True, "units": ("MW",)},
    "q_flow": {"element": "branch", "end": True, "units": ("Mvar",)},
    "i_magnitude": {"element": "branch", "end": True, "units": ("A",)},
    "branch_status": {"element": "branch", "end": False, "units": ("status",)},
    "p_injection": {"element": "bus", "end": False, "units": ("MW",)},
    "q_injection": {"element": "bus", "end": False, "units": ("Mvar",)},
    "v_magnitude": {"element": "bus", "end": False, "units": ("kV",)},
}
#: The status quantity: a breaker's open/closed state, not an analog measurement. Its points
#: may leave ``device`` empty and ``full_scale``/``accuracy_pct`` empty (NaN).
STATUS_QUANTITY = "branch_status"
ANALOG_QUANTITIES = tuple(q for q in QUANTITIES if q != STATUS_QUANTITY)
#: Quantities measured from a CT and a VT together (power), and those a CT (VT) feeds.
POWER_QUANTITIES = ("p_flow", "q_flow", "p_injection", "q_injection")
CT_QUANTITIES = (*POWER_QUANTITIES, "i_magnitude")
VT_QUANTITIES = (*POWER_QUANTITIES, "v_magnitude")
ENDS = ("from", "to")

REQUIRED_POINT_COLUMNS = [
    "quantity", "element", "end", "unit", "full_scale", "accuracy_pct", "substation", "device",
]
OPTIONAL_POINT_COLUMNS = ["rtu", "channel", "ct_ratio", "vt_ratio", "sigma", "note"]
POINT_COLUMNS = REQUIRED_POINT_COLUMNS + OPTIONAL_POINT_COLUMNS


def default_sigma(points: pd.DataFrame) -> pd.Series:
    """Standard deviation of each point in its own unit.

    ``accuracy_pct/100 × full_scale / 3`` — the accuracy-class limit taken as 3σ
    (common practice, no source); a ``sigma`` given in the point list overrides it.
    """
    sigma = points["accuracy_pct"].astype(float) / 100.0 * points["full_scale"].astype(float) / 3.0
    if "sigma" in points:
        given = pd.to_numeric(points["sigma"], errors="coerce")
        sigma = given.where(given.notna() & (given > 0), sigma)
    return sigma


def analog_points(points: pd.DataFrame) -> pd.DataFrame:
    """The points that enter the estimator (everything but branch status)."""
    return points[points["quantity"].isin(ANALOG_QUANTITIES)]


def status_points(points: pd.DataFrame) -> pd.DataFrame:
    """The branch status points (they set the topology per snapshot)."""
    return points[points["quantity"] == STATUS_QUANTITY]


def parse_ratio(text) -> float | None:
    """Primary/secondary of a ratio string such as ``"1200:5"`` (None when empty)."""
    if text is None or (isinstance(text, float) and np.isnan(text)) or str(text).strip() == "":
        return None
    parts = str(text).replace("/", ":").split(":")
    if len(parts) != 2:
        raise ValueError(f"ratio {text!r} is not of the form primary:secondary")
    prim, sec = float(parts[0]), float(parts[1])
    if prim <= 0 or sec <= 0:
        raise ValueError(f"ratio {text!r} must have positive primary and secondary")
    return prim / sec
