"""The point list: what each telemetered analog or status point measures, and how well.

A point list is a DataFrame indexed by ``tag`` with the columns of :data:`POINT_COLUMNS`.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

#: Quantities a point can measure: the element it refers to, whether it is measured at one
#: end of a branch, the units allowed, and what it measures (the family a mismapped point is
#: compared within). Every group of quantities below is derived from this table.
QUANTITIES: dict[str, dict] = {
    "p_flow": {"element": "branch", "end": True, "units": ("MW",), "family": "power"},
    "q_flow": {"element": "branch", "end": True, "units": ("Mvar",), "family": "power"},
    "i_magnitude": {"element": "branch", "end": True, "units": ("A",), "family": "current"},
    "branch_status": {"element": "branch", "end": False, "units": ("status",),
                      "family": "status"},
    "p_injection": {"element": "bus", "end": False, "units": ("MW",), "family": "power"},
    "q_injection": {"element": "bus", "end": False, "units": ("Mvar",), "family": "power"},
    "v_magnitude": {"element": "bus", "end": False, "units": ("kV",), "family": "voltage"},
    "tap_position": {"element": "branch", "end": False, "units": ("step",), "family": "tap"},
}


#: Spellings of the units a point list may use, each to its canonical unit of
#: :data:`QUANTITIES` (matched ignoring case; common practice, no source). The one
#: unit table of calibra: every canonical unit is its own spelling.
UNIT_SPELLINGS: dict[str, str] = {
    **{u.lower(): u for spec in QUANTITIES.values() for u in spec["units"]},
    "megawatt": "MW", "megawatts": "MW",
    "mvars": "Mvar", "mvr": "Mvar", "megavar": "Mvar", "megavars": "Mvar",
    "kilovolt": "kV", "kilovolts": "kV",
    "amp": "A", "amps": "A", "ampere": "A", "amperes": "A",
    "state": "status",
    "steps": "step", "tap step": "step",
}


def _quantities(**spec) -> tuple[str, ...]:
    """The quantities of :data:`QUANTITIES` whose entries have each value of ``spec`` (a
    tuple value: any of its values), in the table's order."""
    def fits(entry: dict) -> bool:
        return all(entry[k] in v if isinstance(v, tuple) else entry[k] == v
                   for k, v in spec.items())
    return tuple(q for q, entry in QUANTITIES.items() if fits(entry))


#: The status quantity: a breaker's open/closed state, not an analog measurement. Its points
#: may leave ``device`` empty and ``full_scale``/``accuracy_pct`` empty (NaN).
STATUS_QUANTITY = "branch_status"
#: The tap-position quantity: a transformer's tap-changer step number, set per snapshot like a
#: breaker status (device, full scale and accuracy may be empty as for status points).
TAP_QUANTITY = "tap_position"
#: Quantities that set the network per snapshot instead of entering the estimator.
SETTING_QUANTITIES = (STATUS_QUANTITY, TAP_QUANTITY)
ANALOG_QUANTITIES = tuple(q for q in QUANTITIES if q not in SETTING_QUANTITIES)
#: Quantities of a branch (status included), of one branch end (flows and current), of a bus.
BRANCH_QUANTITIES = _quantities(element="branch")
BRANCH_END_QUANTITIES = _quantities(element="branch", end=True)
BUS_QUANTITIES = _quantities(element="bus")
#: Quantities measured from a CT and a VT together (power): at a branch end (flows) and at a
#: bus (injections); and those a CT (power, current) or a VT (power, voltage) feeds.
POWER_QUANTITIES = _quantities(family="power")
FLOW_QUANTITIES = _quantities(family="power", element="branch")
INJECTION_QUANTITIES = _quantities(family="power", element="bus")
CT_QUANTITIES = _quantities(family=("power", "current"))
VT_QUANTITIES = _quantities(family=("power", "voltage"))
ENDS = ("from", "to")

#: Quantities as an engineer names them: the one vocabulary of every text a person reads
#: (sheets, findings, evidence, summaries).
QUANTITY_WORDS: dict[str, str] = {
    "p_flow": "active-power flow", "q_flow": "reactive-power flow", "i_magnitude": "current",
    "branch_status": "breaker status", "tap_position": "tap position",
    "p_injection": "active-power injection", "q_injection": "reactive-power injection",
    "v_magnitude": "voltage magnitude",
}
_PAIR_WORDS = {frozenset(("p_flow", "q_flow")): "active- and reactive-power flow",
               frozenset(("p_injection", "q_injection")): "active- and reactive-power injection"}


def quantity_words(quantity: str | tuple[str, ...], element: str, place: str = "") -> str:
    """What a point (or a P and Q pair) measures, as an engineer says it.

    ``place`` names the measured end of a branch (see :func:`end_place`): 'active-power flow at
    the NRC end of MRG-NRC'; without it 'active-power flow on branch MRG-NRC'. Bus quantities:
    'reactive-power injection at bus DRM_33'.
    """
    kinds = (quantity,) if isinstance(quantity, str) else tuple(quantity)
    words = _PAIR_WORDS.get(frozenset(kinds)) if len(kinds) == 2 else None
    words = words or " and ".join(QUANTITY_WORDS.get(k, k.replace("_", " ")) for k in kinds)
    if QUANTITIES.get(kinds[0], {}).get("element") == "branch":
        return f"{words} at the {place} end of {element}" if place else (
            f"{words} on branch {element}")
    return f"{words} at bus {element}"


def quantity_of_words(text: str) -> str:
    """The quantity a :func:`quantity_words` text names ('' when none)."""
    for code, words in QUANTITY_WORDS.items():
        if str(text).startswith(words + " "):
            return code
    return ""


def end_place(buses: pd.DataFrame, branches: pd.DataFrame, branch: str, end: str) -> str:
    """The name a crew knows one end of a branch by: its substation, or its bus when both ends
    lie in the same substation (a transformer). '' when the branch or end is unknown."""
    end = str(end).strip().lower()
    if end not in ENDS or branch not in branches.index:
        return ""
    row = branches.loc[branch]
    here, there = (row["from_bus"], row["to_bus"]) if end == "from" else (
        row["to_bus"], row["from_bus"])
    if here not in buses.index or there not in buses.index:
        return str(here)
    sub_here, sub_there = (str(buses.at[b, "substation"]).strip() for b in (here, there))
    return sub_here if sub_here and sub_here != sub_there else str(here)

REQUIRED_POINT_COLUMNS = [
    "quantity", "element", "end", "unit", "full_scale", "accuracy_pct", "substation", "device",
]
#: How a reading is stored, stated in the point's unit (NaN: inferred from the data): the
#: report-by-exception deadband (a new value is stored only when the reading moves more than
#: this from the last stored one) and the resolution (the step of the converter or historian).
REPORTING_COLUMNS = ["deadband", "resolution"]
OPTIONAL_POINT_COLUMNS = ["rtu", "channel", "ct_ratio", "vt_ratio", "sigma",
                          *REPORTING_COLUMNS, "note"]
POINT_COLUMNS = REQUIRED_POINT_COLUMNS + OPTIONAL_POINT_COLUMNS
#: A stated deadband or resolution above this share of full scale is unusual (a warning):
#: deadbands are typically well under a few percent of full scale. Common practice, no source.
REPORTING_WARN_PCT = 10.0


def class_limit(points: pd.DataFrame | pd.Series) -> pd.Series | float:
    """The accuracy-class limit in the point's own unit: ``accuracy_pct/100 × full_scale``.

    For a point list, a Series by tag; for one point's row, a float (NaN where the point has
    no class or full scale, as status points). Multiply by the point's per-unit factor for the
    limit in per unit.
    """
    if isinstance(points, pd.DataFrame):
        return points["accuracy_pct"].astype(float) / 100.0 * points["full_scale"].astype(float)
    acc, full = points.get("accuracy_pct"), points.get("full_scale")
    if acc is None or full is None or pd.isna(acc) or pd.isna(full):
        return float("nan")
    return float(acc) / 100.0 * float(full)


def default_sigma(points: pd.DataFrame) -> pd.Series:
    """Standard deviation of each point in its own unit.

    The accuracy-class limit (:func:`class_limit`) taken as 3σ (common practice, no source);
    a ``sigma`` given in the point list overrides it.
    """
    sigma = class_limit(points) / 3.0
    if "sigma" in points:
        given = pd.to_numeric(points["sigma"], errors="coerce")
        sigma = given.where(given.notna() & (given > 0), sigma)
    return sigma


def storage_spread(points: pd.DataFrame) -> pd.Series:
    """The standard deviation a reading's storage adds, in the point's unit, from the stated
    deadband and resolution: deadband/√3 (a held reading lags the true value by up to the
    deadband, evenly spread) and step/√12 (uniform quantization error); common practice, no
    source. 0 where the point list states neither."""
    spread = pd.Series(0.0, index=points.index)
    for column, divisor in (("deadband", 3.0), ("resolution", 12.0)):
        if column in points:
            spread = spread + pd.to_numeric(points[column], errors="coerce").fillna(0.0) ** 2 \
                / divisor
    return np.sqrt(spread)


def measurement_sigma(points: pd.DataFrame) -> pd.Series:
    """σ of each point in the estimator's weights: the transducer's (:func:`default_sigma`)
    and the spread of its stated storage (:func:`storage_spread`) together. A deadband or
    resolution the point list leaves empty is not in the weights (it is read from the data
    by the diagnosis, after the estimate)."""
    return np.sqrt(default_sigma(points) ** 2 + storage_spread(points) ** 2)


def stated_reporting(point: pd.Series, column: str) -> float | None:
    """A point's stated ``deadband`` or ``resolution`` (one of :data:`REPORTING_COLUMNS`) in
    its unit, None when the point list leaves it to be inferred from the data."""
    value = point.get(column)
    if value is None or pd.isna(value):
        return None
    return float(value)


def analog_points(points: pd.DataFrame) -> pd.DataFrame:
    """The points that enter the estimator (everything but branch status and tap position)."""
    return points[points["quantity"].isin(ANALOG_QUANTITIES)]


def tap_points(points: pd.DataFrame) -> pd.DataFrame:
    """The tap-position points (they set their transformer's ratio per snapshot)."""
    return points[points["quantity"] == TAP_QUANTITY]


def status_points(points: pd.DataFrame) -> pd.DataFrame:
    """The branch status points (they set the topology per snapshot)."""
    return points[points["quantity"] == STATUS_QUANTITY]


#: An instrument-transformer ratio as written: primary and secondary, positive decimals,
#: separated by ``:``, ``/`` or ``-`` with optional spaces (``1200:5``, ``1200/5``,
#: ``1200 - 5``, ``132000/110``). The one ratio parser of calibra.
_NUMBER = r"(?:\d+(?:\.\d*)?|\.\d+)(?:[eE]\+?\d+)?"
_RATIO = re.compile(rf"^\s*({_NUMBER})\s*[:/-]\s*({_NUMBER})\s*$")


def canonical_ratio(text) -> str | None:
    """A ratio in calibra's written form ``primary:secondary`` (each number as written), ""
    for an empty cell, None when ``text`` is not a ratio of two positive numbers."""
    if text is None or (isinstance(text, float) and np.isnan(text)) or str(text).strip() == "":
        return ""
    match = _RATIO.match(str(text))
    if match is None:
        return None
    prim, sec = match.groups()
    if not float(prim) > 0 or not float(sec) > 0 or not np.isfinite(float(prim) / float(sec)):
        return None
    return f"{prim}:{sec}"


def parse_ratio(text) -> float | None:
    """Primary/secondary of a ratio string such as ``"1200:5"`` (None when empty); see
    :func:`canonical_ratio` for the spellings accepted. Raises ValueError otherwise."""
    written = canonical_ratio(text)
    if written is None:
        raise ValueError(f"ratio {text!r} is not of the form primary:secondary with positive "
                         "numbers")
    if written == "":
        return None
    prim, sec = written.split(":")
    return float(prim) / float(sec)
