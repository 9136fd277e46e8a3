"""The period a review estimates, prepared identically on the client and on every worker.

A review estimates the snapshots of one period of a site with the ledger's software corrections
applied. The client prepares that period once to know its days and a digest of each day's data;
every worker prepares it again from the site folder it reads and checks the digest of each day
before estimating it, so a worker that sees other files (a stale copy, another version of the
point list) stops with a clear error instead of returning different results.
"""

from __future__ import annotations

import hashlib
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from calibra.estimation.model import MeasurementModel
from calibra.estimation.site_estimate import checked_topology
from calibra.estimation.wls import Estimator
from calibra.ledger import Correction, apply_corrections
from calibra.model.site import Site
from calibra.open_work import judge_after_repairs

#: A software correction as plain data: tag, gain, bias, valid_from and valid_until as UTC
#: nanoseconds (None = open).
CorrectionRecord = tuple[str, float, float, int | None, int | None]


class ClusterError(RuntimeError):
    """A cluster review cannot go on (no workers, a worker that reads other data, ...)."""


def correction_records(corrections: Iterable[Correction]) -> tuple[CorrectionRecord, ...]:
    """Corrections as plain, hashable data for the workers (order kept: it matters)."""

    def ns(t: pd.Timestamp | None) -> int | None:
        return None if t is None else int(pd.Timestamp(t).tz_convert("UTC").value)

    return tuple((str(c.tag), float(c.gain), float(c.bias), ns(c.valid_from), ns(c.valid_until))
                 for c in corrections)


def corrections_from_records(records: Iterable[CorrectionRecord]) -> list[Correction]:
    """The inverse of :func:`correction_records`."""

    def ts(v: int | None) -> pd.Timestamp | None:
        return None if v is None else pd.Timestamp(v, tz="UTC")

    return [Correction(tag, gain, bias, ts(a), ts(b)) for tag, gain, bias, a, b in records]


def day_starts(index: pd.DatetimeIndex) -> np.ndarray:
    """Positions where a new day starts, by the same rule as
    :func:`~calibra.estimation.week.topology_runs` (UTC days for a UTC index)."""
    if len(index) == 0:
        return np.zeros(0, np.int64)
    day = index.normalize().asi8
    return np.flatnonzero(np.r_[True, day[1:] != day[:-1]])


def _frame_digest(h, frame: pd.DataFrame) -> None:
    h.update(pd.util.hash_pandas_object(frame, index=True).to_numpy().tobytes())
    h.update("|".join(map(str, frame.columns)).encode())


def site_digest(site: Site) -> str:
    """Digest of what the measurement model is built from: network and point list."""
    h = hashlib.blake2b(digest_size=16)
    net = site.network
    _frame_digest(h, net.buses)
    _frame_digest(h, net.branches)
    _frame_digest(h, site.points)
    h.update(f"{net.base_mva!r}|{net.reference_bus}|{site.timezone}".encode())
    return h.hexdigest()


@dataclass
class PreparedPeriod:
    """The per-unit telemetry of a period, its topology and the estimator for it."""

    estimator: Estimator
    z: np.ndarray  # k × m per unit, NaN = missing, corrections applied
    in_service: np.ndarray  # k × branches
    index: pd.DatetimeIndex
    site_digest: str
    _day_digests: dict[tuple[int, int], str] = field(default_factory=dict, repr=False)

    def day_bounds(self) -> list[tuple[int, int]]:
        """(first, end) positions of each day of the period."""
        starts = day_starts(self.index)
        return [(int(a), int(b)) for a, b in zip(starts, np.r_[starts[1:], len(self.index)],
                                                  strict=True)]

    def day_digest(self, a: int, b: int) -> str:
        """Digest of snapshots a..b−1: times, per-unit values and branch status."""
        key = (a, b)
        if key not in self._day_digests:
            h = hashlib.blake2b(digest_size=16)
            h.update(self.index[a:b].asi8.tobytes())
            h.update(np.ascontiguousarray(self.z[a:b]).tobytes())
            h.update(np.packbits(self.in_service[a:b], axis=None).tobytes())
            self._day_digests[key] = h.hexdigest()
        return self._day_digests[key]


def prepare_period(site: Site, start: pd.Timestamp | None, end: pd.Timestamp | None,
                   corrections: Iterable[Correction] = (),
                   held_out: Mapping[str, pd.Timestamp] | None = None) -> PreparedPeriod:
    """The snapshots of ``site`` from ``start`` to ``end`` (inclusive) with ``corrections``
    and the values of ``held_out`` points before their times left out (repairs judged on the
    data after them), converted to per unit and checked for topology exactly as the week
    review does (:func:`calibra.review_run.run_review`)."""
    snaps = site.snapshots.loc[start:end]
    corrections = list(corrections)
    if corrections:
        snaps = apply_corrections(snaps, corrections, missing="ignore")
    snaps = judge_after_repairs(snaps, dict(held_out or {}))
    model = MeasurementModel.from_points(site.network, site.points)
    values = snaps.reindex(columns=model.tags).to_numpy(float)
    z = model.to_per_unit(values)
    in_service, _ = checked_topology(site, snaps)
    return PreparedPeriod(Estimator(model), z, in_service, snaps.index, site_digest(site))
