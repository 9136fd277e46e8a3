"""What the diagram says about a hovered branch: its flows as the review estimated them, free
of Qt. The flows are those of the period's last estimated snapshot, at both ends."""

from __future__ import annotations

import numpy as np

from calibra.diagnosis.mismap import Quantity, QuantityEvaluator
from calibra.diagnosis.review import ReviewResult
from calibra.model.points import FLOW_QUANTITIES
from calibra.model.site import Site
from calibra.model.times import for_people


def branch_flow_texts(site: Site, result: ReviewResult, branches: list[str]) -> dict[str, str]:
    """``{branch: 'at A: 12.3 MW, 4.1 Mvar · at B: −12.2 MW, −3.9 Mvar (estimate of …)'}`` for
    the branches of ``branches`` the last estimated snapshot covers."""
    net = site.network
    ev = result.evidence
    known = [b for b in branches if b in net.branches.index]
    if not known or not len(ev.index):
        return {}
    covered = np.isfinite(ev.period.vm).all(axis=1)
    if not covered.any():
        return {}
    k = int(np.flatnonzero(covered)[-1])
    quantities = [Quantity(q, b, end) for b in known for end in ("from", "to")
                  for q in FLOW_QUANTITIES]
    values = QuantityEvaluator(net, quantities).evaluate(
        ev.period.vm[k:k + 1], ev.period.va[k:k + 1], ev.in_service[k:k + 1])[0]
    when = for_people(ev.index[k], site.timezone, weekday=True)
    out = {}
    for j, b in enumerate(known):
        p_f, q_f, p_t, q_t = (float(v) for v in values[4 * j:4 * j + 4])
        if not np.isfinite([p_f, q_f, p_t, q_t]).all():
            continue
        f, t = net.branches.at[b, "from_bus"], net.branches.at[b, "to_bus"]
        out[b] = (f"at {f}: {p_f:+.1f} MW, {q_f:+.1f} Mvar · at {t}: {p_t:+.1f} MW, "
                  f"{q_t:+.1f} Mvar\n(flowing into the branch is +; estimate of {when})")
    return out
