"""Which additional meter would make a critical point checkable.

A critical measurement i has Sᵢᵢ = 0: hᵢ P hᵢᵀ = σᵢ². Adding a measurement j with row hⱼ and
variance σⱼ² updates the state covariance by a rank-one step, which gives
Sᵢᵢ' = (hᵢ P hⱼᵀ)² / (σᵢ² (σⱼ² + hⱼ P hⱼᵀ)) (Sherman-Morrison). The candidate with the largest
Sᵢᵢ' among the quantities at the point's substation and the far ends of its branches is
suggested; equal candidates go to the first by (quantity, element, end), never by the order of
a set, so every run on the same data suggests the same meter.

A point that depends on a bus whose state no meter determines cannot be checked at all; the
meter suggested for it is the one, among meters at those buses and the far ends of their
branches, with which the observability test estimates the point's buses (and most others).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from calibra.diagnosis.mismap import (
    Quantity,
    QuantityEvaluator,
    own_quantity,
    substation_quantities,
)
from calibra.estimation.covariance import quadratic_diagonal
from calibra.estimation.measurement_model import MeasurementModel
from calibra.estimation.measurements import P_FLOW, P_INJ, Q_FLOW, Q_INJ, V_MAG
from calibra.estimation.observability import (
    Observability,
    ObservabilityStructure,
    structure_for,
)
from calibra.model.points import (
    ENDS,
    FLOW_QUANTITIES,
    INJECTION_QUANTITIES,
    STATUS_QUANTITY,
    end_place,
    quantity_words,
)
from calibra.model.site import Site

#: Suggestions must lift Sᵢᵢ to at least this to count.
MIN_USEFUL_S = 0.05


def _metered(site: Site) -> set[Quantity]:
    pts = site.points
    analog = pts[pts["quantity"] != STATUS_QUANTITY]
    ends = analog["end"].astype(str).str.strip().str.lower()
    return {Quantity(str(q), str(e), end if end in ("from", "to") else "")
            for q, e, end in zip(analog["quantity"], analog["element"], ends, strict=True)}


def _nearby_quantities(site: Site, tag: str, metered: set[Quantity]) -> list[Quantity]:
    pts = site.points
    net = site.network
    subs = {str(pts.at[tag, "substation"])}
    own = own_quantity(pts.loc[tag])
    if own.end:
        br = net.branches.loc[own.element]
        for bus in (br["from_bus"], br["to_bus"]):
            subs.add(str(net.buses.at[bus, "substation"]))
    out: list[Quantity] = []
    for sub in sorted(subs):
        out += substation_quantities(net, sub)
    return [q for q in dict.fromkeys(out) if q not in metered]


def suggest_meters(site: Site, ev, points: np.ndarray) -> dict[int, dict]:
    """Best additional meter for each critical point (positions in the evidence's model):
    ``{position: {"suggestion", "sensitivity"}}``. All candidates are evaluated together."""
    rep = ev.representative
    points = [int(i) for i in points]
    if rep is None or rep.covariance.size == 0 or not points:
        return {i: {"suggestion": "", "sensitivity": 0.0} for i in points}
    metered = _metered(site)
    model = ev.model
    tags = model.tags
    cands = {i: _nearby_quantities(site, str(tags[i]), metered) for i in points}
    union = list(dict.fromkeys(q for qs in cands.values() for q in qs))
    out = {i: {"suggestion": "", "sensitivity": 0.0} for i in points}
    if not union:
        return out
    est = rep.estimate
    P = rep.covariance
    where = {q: j for j, q in enumerate(union)}
    Hj = QuantityEvaluator(site.network, union).functions.jacobian(
        est.vm, est.va, est.layout, est.in_service).tocsr()
    var_j = quadratic_diagonal(Hj, P)
    Hi = model.functions.jacobian(est.vm, est.va, est.layout, est.in_service)[points].tocsr()
    PH = np.asarray(Hi @ P)  # rows hᵢP
    for k, i in enumerate(points):
        if not cands[i]:
            continue
        cols = np.array([where[q] for q in cands[i]])
        sig_i2 = model.sigma_pu[i] ** 2
        cross = np.asarray(Hj[cols] @ PH[k]).ravel()
        # Sherman-Morrison; the new meter assumed of the same class as the point.
        s_new = cross ** 2 / (sig_i2 * (sig_i2 + var_j[cols]))
        j = _stable_best(s_new, cands[i])
        if j < 0:  # no candidate with a finite gain (its states not in the estimate)
            continue
        best = float(s_new[j])
        out[i] = {"suggestion": f"a meter of the {cands[i][j].label()}"
                  if best >= MIN_USEFUL_S else "", "sensitivity": best}
    return out


#: Candidates whose gains differ by less than this share of the best count as equal.
TIE_TOLERANCE = 1e-6


def _stable_best(gains: np.ndarray, candidates: list[Quantity]) -> int:
    """Position of the best candidate (-1 when no gain is finite); equal gains (both ends of a
    radial line, rounding noise) go to the first by (quantity, element, end), so every run
    suggests the same."""
    finite = np.isfinite(gains)
    if not finite.any():
        return -1
    gains = np.where(finite, gains, -np.inf)
    top = float(np.max(gains))
    tied = np.flatnonzero(gains >= top - TIE_TOLERANCE * max(abs(top), 1e-300))
    return int(min(tied, key=lambda j: _meter_key(candidates[j])))


def _meter_key(q: Quantity) -> tuple[str, str, str]:
    return (q.quantity, q.element, q.end)


# ---------------------------------------------------------------------- not observable points
#: Candidate meters tried per group of points that share the same unobservable buses.
MAX_CANDIDATES = 60


@dataclass(frozen=True)
class _Meter:
    """A meter one could add: P and Q at a branch end or a bus, or a bus voltage."""

    codes: tuple[int, ...]
    element: int
    end: int  # 0 from, 1 to (branch ends), 0 otherwise
    text: str


def _meter_text(net, kind: str, element: int, end: int = 0) -> str:
    """'a meter of the active- and reactive-power flow at the NRC end of MRG-NRC', …"""
    buses = net.buses
    if kind == "flow":
        branch = str(net.branches.index[element])
        place = end_place(buses, net.branches, branch, ENDS[end])
        return f"a meter of the {quantity_words(FLOW_QUANTITIES, branch, place)}"
    bus = str(buses.index[element])
    what = INJECTION_QUANTITIES if kind == "injection" else "v_magnitude"
    return (f"a meter of the {quantity_words(what, bus)} "
            f"(substation {buses.at[bus, 'substation']})")


def _candidates(net, lost: np.ndarray, zero_injection: np.ndarray) -> list[_Meter]:
    """Meters at the buses in ``lost`` (positions) and at the far ends of their branches."""
    adm = net.branch_admittances()
    on = adm.in_service
    out: list[_Meter] = []
    for b in lost:
        for e in np.flatnonzero(on & ((adm.f == b) | (adm.t == b))):
            for end in (0, 1):
                out.append(_Meter((P_FLOW, Q_FLOW), int(e), end, _meter_text(net, "flow", e, end)))
        if not zero_injection[b]:
            out.append(_Meter((P_INJ, Q_INJ), int(b), 0, _meter_text(net, "injection", b)))
        out.append(_Meter((V_MAG,), int(b), 0, _meter_text(net, "voltage", b)))
    return list(dict.fromkeys(out))[:MAX_CANDIDATES]


def not_observable_points(model: MeasurementModel, observability: Observability,
                          available: np.ndarray, in_service: np.ndarray) -> dict[int, dict]:
    """Points the estimate cannot use because they depend on buses no meter determines (or
    tie islands no meter links), each with the reason and the one added meter, if any, that
    would make it observable: ``{point position: {"reason", "suggestion"}}``.

    ``available``: the points that report through the period (faulty ones left out);
    ``observability``: the outcome for that pattern.
    """
    net = model.network
    bad = np.flatnonzero(~observability.usable)
    if bad.size == 0:
        return {}
    island = observability.island
    touch = structure_for(model.functions, model.constraints, in_service).touch
    groups: dict[tuple, list[int]] = {}
    for i in bad:
        buses = np.sort(touch.indices[touch.indptr[i]:touch.indptr[i + 1]])
        groups.setdefault(tuple(buses.tolist()), []).append(int(i))
    out: dict[int, dict] = {}
    for buses, members in groups.items():
        b = np.asarray(buses, np.int64)
        lost = b[island[b] < 0]
        names = ", ".join(f"{net.buses.index[x]} ({net.buses.iloc[x]['substation']})"
                          for x in (lost if lost.size else b)[:4])
        if lost.size:
            reason = (f"not observable: it depends on bus {names}, whose state no other meter "
                      "determines")
        else:
            reason = (f"not observable: it ties buses {names} of parts of the network that no "
                      "other meter links")
        meter = _best_meter(model, available, in_service, b, lost if lost.size else b)
        text = (f"; {meter.text} would make it observable" if meter is not None else
                "; no single added meter would make it observable")
        for i in members:
            out[i] = {"reason": reason + text, "suggestion": meter.text if meter else ""}
    return out


def _best_meter(model: MeasurementModel, available: np.ndarray, in_service: np.ndarray,
                needed: np.ndarray, around: np.ndarray) -> _Meter | None:
    """The candidate meter near ``around`` with which every bus in ``needed`` is estimated in
    one island, estimating the most buses (None: no single meter does)."""
    net = model.network
    cands = _candidates(net, around, net.buses["zero_injection"].to_numpy(bool))
    if not cands:
        return None
    funcs, cons = model.functions, model.constraints
    extra_code = np.array([c for m in cands for c in m.codes], np.int64)
    extra_elem = np.array([m.element for m in cands for _ in m.codes], np.int64)
    owner = np.array([j for j, m in enumerate(cands) for _ in m.codes], np.int64)
    st = ObservabilityStructure(net, np.r_[funcs.code, extra_code],
                                np.r_[funcs.element, extra_elem], in_service,
                                cons.code, cons.element)
    best, best_key = None, None
    for j, meter in enumerate(cands):
        avail = np.r_[np.asarray(available, bool), owner == j]
        obs = st.analyse(avail, net.reference_position)
        isl = obs.island[needed]
        if (isl < 0).any() or np.unique(isl).size > 1:
            continue
        # most buses estimated, fewest islands; equal ones by (kind, element, end)
        key = (-int(obs.estimated_buses.sum()), obs.n_islands, meter.codes, meter.element,
               meter.end)
        if best_key is None or key < best_key:
            best, best_key = meter, key
    return best
