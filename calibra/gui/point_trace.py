"""One point's week as arrays ready to plot, free of Qt.

From a review's evidence: measured against what the rest of the network implies, the residual
(measured − implied) with the accuracy band, the fitted fault model, and the snapshots where
the point has no value, its branch is out of service or the network could not be estimated.
Times are wall-clock seconds in the site's timezone (so the axis reads local time).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from calibra.diagnosis.findings import DiagnosisKind, FindingKind
from calibra.diagnosis.mismap import QuantityEvaluator, substation_quantities
from calibra.diagnosis.review import ReviewResult
from calibra.ledger import Correction
from calibra.model.points import BRANCH_QUANTITIES, class_limit
from calibra.model.site import Site

MAX_SCATTER = 3000  #: scatter points drawn at most (an even subsample beyond)


@dataclass
class PointTrace:
    """Arrays (length k, float64 unless said) for one point over the reviewed period."""

    tag: str
    unit: str
    x: np.ndarray  #: wall-clock seconds (site timezone) since 1970-01-01
    measured: np.ndarray  #: after software corrections in force
    implied: np.ndarray
    raw: np.ndarray | None  #: as received, when a correction changed it
    band: float  #: accuracy class limit: accuracy_pct % × full_scale
    missing: np.ndarray  #: bool: no measured value
    out_of_service: np.ndarray  #: bool: the point's branch is open
    not_estimated: np.ndarray  #: bool: no estimate of the point's buses in the snapshot
    kind: str = ""  #: diagnosis kind (healthy, reversed, scale, offset, drift, stuck, …)
    slope: float | None = None  #: fitted line in the scatter: measured ≈ slope·implied + intercept
    intercept: float = 0.0
    model_residual: np.ndarray | None = None  #: the fitted error model over time
    model_label: str = ""
    followed: np.ndarray | None = None  #: a mismapped point: the estimate of what it reads
    followed_label: str = ""  #: that quantity in words ("reactive-power flow on branch …")

    @property
    def compared(self) -> np.ndarray:
        """What the scatter sets the point against: the quantity it follows when it is
        mismapped, else its own implied value."""
        return self.followed if self.followed is not None else self.implied

    @property
    def residual(self) -> np.ndarray:
        return self.measured - self.implied

    def scatter(self, limit: int = MAX_SCATTER) -> tuple[np.ndarray, np.ndarray]:
        """(implied, measured) where both exist, evenly thinned to at most ``limit`` pairs."""
        against = self.compared
        ok = np.flatnonzero(np.isfinite(self.measured) & np.isfinite(against))
        if ok.size > limit:
            ok = ok[np.linspace(0, ok.size - 1, limit).astype(int)]
        return against[ok], self.measured[ok]


def wall_clock_seconds(index: pd.DatetimeIndex, timezone: str) -> np.ndarray:
    """UTC timestamps as wall-clock seconds in ``timezone``."""
    local = index.tz_convert(timezone).tz_localize(None)
    return (local - pd.Timestamp("1970-01-01")).total_seconds().to_numpy()


def corrected_snapshots(corrections: Sequence[Correction], tag: str,
                        index: pd.DatetimeIndex) -> np.ndarray:
    """bool per snapshot of ``index``: a software correction that changes values (gain other
    than 1 or a bias) was in force on ``tag``."""
    hit = np.zeros(len(index), bool)
    for c in corrections:
        if c.tag != tag or (c.gain == 1.0 and c.bias == 0.0):
            continue
        inside = np.ones(len(index), bool)
        if c.valid_from is not None:
            inside &= index >= c.valid_from
        if c.valid_until is not None:
            inside &= index < c.valid_until
        hit |= inside
    return hit


def point_trace(site: Site, result: ReviewResult, tag: str,
                corrections: Sequence[Correction] = ()) -> PointTrace | None:
    """The plot arrays of ``tag`` from a review; None when the review did not judge it.
    ``corrections``: the software corrections the review applied (``ReviewRun.corrections``);
    the values as received are kept when one of them changed a value of the point."""
    ev = result.evidence
    if tag not in ev.model.tags:
        return None
    i = int(ev.model.tags.get_loc(tag))
    pt = site.points.loc[tag]
    measured = ev.measured[:, i].astype(float)
    implied = ev.implied[:, i].astype(float)
    raw = None
    if tag in site.snapshots.columns:
        received = site.snapshots[tag].reindex(ev.index).to_numpy(float)
        changed = (corrected_snapshots(corrections, str(tag), ev.index)
                   & np.isfinite(received) & np.isfinite(measured))
        if changed.any():
            raw = received
    out = np.zeros(len(ev.index), bool)
    if str(pt["quantity"]) in BRANCH_QUANTITIES:
        branches = site.network.branches.index
        element = str(pt["element"])
        if element in branches:
            out = ~ev.in_service[:, branches.get_loc(element)].astype(bool)
    outcomes = ev.period.outcomes
    # Estimated where the snapshot converged and its estimate covers the point's buses (parts
    # of a network may be unobservable in some or all snapshots).
    buses = ev.model.functions.buses_of(i)
    covered = np.isfinite(ev.period.vm[:, buses]).all(axis=1)
    estimated = outcomes["converged"].astype(bool).to_numpy() & covered
    limit = class_limit(pt)
    trace = PointTrace(
        tag=str(tag), unit=str(pt["unit"]), x=wall_clock_seconds(ev.index, site.timezone),
        measured=measured, implied=implied, raw=raw, band=limit,
        missing=~np.isfinite(measured) & ~out, out_of_service=out,
        not_estimated=~estimated,
    )
    diagnosis = result.diagnoses.get(str(tag))
    if diagnosis is not None:
        t_days = ((ev.index - ev.index[0]).total_seconds() / 86400.0).to_numpy()
        _add_model(trace, diagnosis.kind, diagnosis.params, t_days)
    _add_followed(site, result, trace, i)
    return trace


def _add_followed(site: Site, result: ReviewResult, trace: PointTrace, i: int) -> None:
    """For a mismapped point, the estimate of the quantity it reads instead (with the sign
    it follows), evaluated from the period's estimated states."""
    matched = next((f.matched for f in result.findings
                    if f.tag == trace.tag and f.finding == FindingKind.MISMAPPED and f.matched), "")
    if not matched:
        return
    ev = result.evidence
    net = site.network
    sub = str(net.buses["substation"].astype(str).iloc[int(ev.model.bus_of_point[i])])
    quantity = next((q for q in substation_quantities(net, sub) if q.label() == matched), None)
    if quantity is None:
        return
    values = QuantityEvaluator(net, [quantity]).evaluate(ev.period.vm, ev.period.va,
                                                        ev.in_service)[:, 0].astype(float)
    ok = np.isfinite(values) & np.isfinite(trace.measured)
    if not ok.any():
        return
    z, y = trace.measured[ok], values[ok]
    sign = -1.0 if np.median(np.abs(z + y)) < np.median(np.abs(z - y)) else 1.0
    trace.followed = sign * values
    trace.followed_label = ("−" if sign < 0 else "") + matched


def _add_model(trace: PointTrace, kind: DiagnosisKind, params: dict, t_days: np.ndarray) -> None:
    """The fitted fault model as a scatter line and as an error over time."""
    trace.kind = kind
    y = trace.implied
    if kind in (DiagnosisKind.REVERSED, DiagnosisKind.SCALE) and "factor" in params:
        k = float(params["factor"])
        trace.slope, trace.intercept = k, 0.0
        trace.model_residual = (k - 1.0) * y
        trace.model_label = f"fit: measured = {k:.3f} × implied"
    elif kind == DiagnosisKind.OFFSET and "offset" in params:
        c = float(params["offset"])
        trace.slope, trace.intercept = 1.0, c
        trace.model_residual = np.full_like(y, c)
        trace.model_label = f"fit: measured = implied {c:+.3g} {trace.unit}"
    elif kind == DiagnosisKind.DRIFT and "drift_per_day" in params:
        a, t0 = float(params["drift_per_day"]), float(params["onset_days"])
        trace.model_residual = a * np.maximum(t_days - t0, 0.0)
        trace.model_label = f"fit: drift {a:+.3g} {trace.unit}/day"
    elif kind == DiagnosisKind.STUCK and "value" in params:
        start = float(params["onset_days"])
        until = params.get("until_days")
        stop = float(until) if until is not None else float(t_days[-1]) if t_days.size else start
        frozen = (t_days >= start) & (t_days <= stop)
        trace.model_residual = np.where(frozen, float(params["value"]) - y, np.nan)
        trace.model_label = f"fit: frozen at {float(params['value']):.4g} {trace.unit}"
