"""How a point's readings were stored, read from its own series: the report-by-exception
deadband and the resolution (the step of the converter or the historian), and where a
deadband or resolution stated in the point list disagrees with what the series shows.

A reading stored by exception is stored again only when it moves more than the deadband from
the last stored value, and held in between (common practice, no source): every step between
two stored values is larger than the deadband, and the series repeats its previous value
while the quantity moves within it. A reading on a converter's or historian's grid takes a
few values over and over: the gaps between its distinct values are the grid's step.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: A reading repeats its previous value in at least this share of snapshots before it is taken
#: as stored by exception (a full-resolution reading of a live quantity almost never repeats).
HELD_SHARE = 0.3
#: The deadband is read as this low quantile of the steps between stored values (a stored
#: value differs from the one before by at least the deadband; the quantile keeps a few
#: smaller steps, e.g. at a forced periodic update, from deciding it).
DEADBAND_QUANTILE = 0.05
#: Fewest values with which a series says anything about its storage.
MIN_VALUES = 50
#: A grid is seen when the series takes at most this share as many distinct values as it has
#: stored values (runs of equal values): it returns to the same values again and again.
GRID_SHARE = 0.5
#: The resolution is read as this low quantile of the gaps between adjacent distinct values
#: (the grid's step wherever neighbouring values are both taken; a reading held by a deadband
#: skips levels, leaving gaps of several steps, and a historian rounding a converter's step to
#: its own leaves gaps of two sizes: the low quantile takes the smallest that recurs).
RESOLUTION_QUANTILE = 0.05
#: Fewest gaps between distinct values from which the series is said to contradict a stated
#: resolution (a reading that takes three or four values in a week, e.g. held by a deadband
#: wider than its movement, shows a step but proves no grid).
MIN_GAPS = 10
#: A stated value and the series disagree when they differ by more than this factor.
DISAGREEMENT_FACTOR = 2.0


def _values(z: np.ndarray) -> np.ndarray:
    v = np.asarray(z, float)
    return v[np.isfinite(v)]


def _tolerance(v: np.ndarray) -> float:
    """Changes smaller than this are round-off (the values are stored as float32)."""
    return 1e-6 * max(1.0, float(np.abs(v).max()))


def reporting_deadband(z: np.ndarray) -> float:
    """The deadband of a reading stored by exception, inferred from its series (in time order,
    NaN where missing): 0 when the reading rarely repeats its previous value, else the low
    quantile :data:`DEADBAND_QUANTILE` of the steps between stored values (the smallest change
    that made the historian store a new value; with no deadband, the converter's step).
    Common practice, no source."""
    v = _values(z)
    if v.size < MIN_VALUES:
        return 0.0
    steps = np.abs(np.diff(v))
    moved = steps > 1e-9 * max(1.0, float(np.abs(v).max()))
    if moved.sum() < 2 or 1.0 - moved.mean() < HELD_SHARE:
        return 0.0
    return float(np.quantile(steps[moved], DEADBAND_QUANTILE))


def reading_resolution(z: np.ndarray) -> float:
    """The step of the grid a reading's stored values lie on, inferred from its series: the
    quantile :data:`RESOLUTION_QUANTILE` of the gaps between adjacent distinct values, when
    the series returns to the same values (at most :data:`GRID_SHARE` as many distinct values
    as stored values); else 0: a grid too fine to be seen against the reading's own spread,
    whose rounding (σ = step/√12) is then below what the data can show."""
    v = _values(z)
    if v.size < MIN_VALUES:
        return 0.0
    tol = _tolerance(v)
    stored = 1 + int(np.count_nonzero(np.abs(np.diff(v)) > tol))
    distinct = np.unique(v)
    gaps = np.diff(distinct)
    gaps = gaps[gaps > tol]
    if gaps.size < 2 or gaps.size + 1 > GRID_SHARE * stored:
        return 0.0
    return float(np.quantile(gaps, RESOLUTION_QUANTILE))


def _changes(v: np.ndarray) -> np.ndarray:
    steps = np.abs(np.diff(v))
    return steps[steps > _tolerance(v)]


@dataclass(frozen=True)
class Disagreement:
    """A stated deadband or resolution the point's series contradicts: the column, the value
    the series shows (in the point's unit) and why, in words."""

    column: str
    shown: float
    why: str


def reporting_disagreements(z: np.ndarray, deadband: float | None, resolution: float | None,
                            unit: str) -> list[Disagreement]:
    """Where a stated ``deadband`` or ``resolution`` (None: not stated) disagrees with the
    series ``z`` by more than :data:`DISAGREEMENT_FACTOR`:

    - the series changes by much less than the stated deadband between stored values (in more
      than :data:`DEADBAND_QUANTILE` of its changes): the stated deadband is too wide;
    - the series is held (it repeats its previous value in at least :data:`HELD_SHARE` of the
      snapshots) and changes only by much more than the stated deadband: it is too narrow;
    - the distinct values lie on a grid much coarser than the stated resolution, or are spaced
      much more finely than it.
    """
    v = _values(z)
    out: list[Disagreement] = []
    if v.size < MIN_VALUES:
        return out
    changes = _changes(v)
    if deadband is not None and changes.size >= MIN_GAPS:
        low = float(np.quantile(changes, DEADBAND_QUANTILE))
        held = reporting_deadband(v)
        floor = max(deadband, resolution or 0.0, reading_resolution(v))
        if deadband > 0 and low * DISAGREEMENT_FACTOR < deadband:
            out.append(Disagreement("deadband", low, (
                f"the readings change by as little as {low:.3g} {unit} between stored values, "
                f"less than half the stated deadband of {deadband:.3g} {unit}")))
        elif held > DISAGREEMENT_FACTOR * floor:
            out.append(Disagreement("deadband", held, (
                f"the readings are held and change by at least {held:.3g} {unit} between "
                f"stored values, more than twice the stated deadband of {deadband:.3g} {unit}")))
    if resolution is not None:
        seen = reading_resolution(v)
        distinct = np.diff(np.unique(v))
        distinct = distinct[distinct > _tolerance(v)]
        if seen > DISAGREEMENT_FACTOR * resolution and distinct.size >= MIN_GAPS:
            out.append(Disagreement("resolution", seen, (
                f"the readings lie on steps of about {seen:.3g} {unit}, more than twice the "
                f"stated resolution of {resolution:.3g} {unit}")))
        elif resolution > 0 and distinct.size >= MIN_GAPS:
            fine = float(np.quantile(distinct, DEADBAND_QUANTILE))
            if fine * DISAGREEMENT_FACTOR < resolution:
                out.append(Disagreement("resolution", fine, (
                    f"the readings take values {fine:.3g} {unit} apart, less than half the "
                    f"stated resolution of {resolution:.3g} {unit}")))
    return out
