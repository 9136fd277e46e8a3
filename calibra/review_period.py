"""Which snapshots a review looks at: the chosen period with the ledger's software corrections
applied and repaired points judged on their data after the repair, prepared for estimation.

The one place the period is chosen and corrected: the review (:mod:`calibra.review_run`) calls
:func:`period_for_review`; a cluster worker that reads the site itself calls
:func:`select_period` with the corrections the review sent, so both hold the same values.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping

import pandas as pd

from calibra.estimation.period import PreparedPeriod, prepare_period
from calibra.ledger import Correction, Ledger, apply_corrections
from calibra.model.site import Site
from calibra.open_work import judge_after_repairs, repairs_inside


def select_period(site: Site, start: pd.Timestamp | None = None,
                  end: pd.Timestamp | None = None, corrections: Iterable[Correction] = (),
                  held_out: Mapping[str, pd.Timestamp] | None = None) -> PreparedPeriod:
    """The snapshots of ``site`` from ``start`` to ``end`` (inclusive) with ``corrections``
    applied and each ``held_out`` point's values before its time left out, prepared for
    estimation. ValueError when the period holds no snapshot."""
    snaps = site.snapshots.loc[start:end]
    if snaps.empty:
        raise ValueError("no snapshots in the chosen period")
    corrections = tuple(corrections)
    if corrections:
        snaps = apply_corrections(snaps, corrections, missing="ignore")
    held = dict(held_out or {})
    snaps = judge_after_repairs(snaps, held)
    return prepare_period(site, snaps, corrections=corrections, held_out=held)


def period_for_review(site: Site, start: pd.Timestamp | None = None,
                      end: pd.Timestamp | None = None,
                      ledger: Ledger | None = None) -> PreparedPeriod:
    """:func:`select_period` with the software corrections in force in the period and the
    repairs made inside it, as ``ledger`` holds them (none without a ledger)."""
    index = site.snapshots.loc[start:end].index
    if ledger is None or len(index) == 0:
        return select_period(site, start, end)
    first, last = index[0], index[-1]
    return select_period(site, start, end, ledger.active_corrections((first, last)),
                         with_rtu_points(site, repairs_inside(ledger, first, last)))


def with_rtu_points(site: Site, repairs: Mapping[str, pd.Timestamp]) -> dict[str, pd.Timestamp]:
    """Repairs with an RTU's clock set right at a time (a ``time_offset`` finding marked
    repaired; its tag is the RTU) extended to every point of the RTU: they are judged on
    their data after it."""
    out = dict(repairs)
    if "rtu" not in site.points:
        return out
    rtu_of = site.points["rtu"].fillna("").astype(str)
    for name, at in repairs.items():
        if name not in site.points.index:
            for tag in rtu_of.index[rtu_of == name]:
                out[str(tag)] = max(at, out.get(str(tag), at))
    return out
