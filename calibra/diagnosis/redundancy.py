"""Which additional meter would make a critical point checkable.

A critical measurement i has Sᵢᵢ = 0: hᵢ P hᵢᵀ = σᵢ². Adding a measurement j with row hⱼ and
variance σⱼ² updates the state covariance by a rank-one step, which gives
Sᵢᵢ' = (hᵢ P hⱼᵀ)² / (σᵢ² (σⱼ² + hⱼ P hⱼᵀ)) (Sherman-Morrison). The candidate with the largest
Sᵢᵢ' among the quantities at the point's substation and the far ends of its branches is
suggested.
"""

from __future__ import annotations

import numpy as np

from calibra.diagnosis.mismap import (
    Quantity,
    QuantityEvaluator,
    own_quantity,
    substation_quantities,
)
from calibra.model.site import Site

#: Suggestions must lift Sᵢᵢ to at least this to count.
MIN_USEFUL_S = 0.05


def _nearby_quantities(site: Site, tag: str) -> list[Quantity]:
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
    metered = {own_quantity(row) for _, row in pts.iterrows()
               if row["quantity"] != "branch_status"}
    return [q for q in dict.fromkeys(out) if q not in metered]


def suggest_meter(site: Site, ev, i: int) -> dict:
    """Best additional meter for critical point ``i`` of the evidence's model."""
    rep = ev.representative
    tag = str(ev.model.tags[i])
    cands = _nearby_quantities(site, tag)
    if rep is None or not cands or rep.covariance.size == 0:
        return {"suggestion": "", "sensitivity": 0.0}
    est = rep.estimate
    model = ev.model
    hi = model.functions.jacobian(est.vm, est.va, est.layout, est.in_service)[i].toarray().ravel()
    ev_c = QuantityEvaluator(site.network, cands)
    Hj = ev_c.functions.jacobian(est.vm, est.va, est.layout, est.in_service).toarray()
    P = rep.covariance
    sig_i2 = model.sigma_pu[i] ** 2
    sig_j2 = np.full(len(cands), sig_i2)  # assume a meter of the same class
    ph = P @ hi
    cross = Hj @ ph
    var_j = np.sum((Hj @ P) * Hj, axis=1)
    s_new = cross ** 2 / (sig_i2 * (sig_j2 + var_j))
    j = int(np.argmax(s_new))
    if s_new[j] < MIN_USEFUL_S:
        return {"suggestion": "", "sensitivity": float(s_new[j])}
    return {"suggestion": cands[j].label(), "sensitivity": float(s_new[j])}
