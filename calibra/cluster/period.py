"""The period a review estimates, prepared identically on the client and on every worker.

A review estimates the snapshots of one period of a site with the ledger's software corrections
applied. The review prepares that period once (:func:`calibra.review_period.select_period`) and the
client takes from it its days and a digest of each day's data; every worker prepares it again
with the same function from the site folder it reads and checks the digest of each day before
estimating it, so a worker that sees other files (a stale copy, another version of the
point list) stops with a clear error instead of returning different results.
"""

from __future__ import annotations

import hashlib
from collections.abc import Iterable
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from calibra.estimation.period import PreparedPeriod
from calibra.ledger import Correction
from calibra.model.site import Site

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


def day_bounds(index: pd.DatetimeIndex) -> list[tuple[int, int]]:
    """(first, end) positions of each day of a period's index."""
    starts = day_starts(index)
    return [(int(a), int(b)) for a, b in zip(starts, np.r_[starts[1:], len(index)], strict=True)]


def day_digest(period: PreparedPeriod, a: int, b: int) -> str:
    """Digest of snapshots a..b−1 of ``period``: times, per-unit values and branch status."""
    h = hashlib.blake2b(digest_size=16)
    h.update(period.index[a:b].asi8.tobytes())
    h.update(np.ascontiguousarray(period.z[a:b]).tobytes())
    state = period.in_service[a:b]
    h.update(np.packbits(state, axis=None).tobytes() if state.dtype == bool
             else np.ascontiguousarray(state, float).tobytes())
    return h.hexdigest()


@dataclass
class DayDigests:
    """A prepared period's site digest and the digests of its days, each computed once."""

    period: PreparedPeriod
    site_digest: str = ""
    _days: dict[tuple[int, int], str] = field(default_factory=dict, repr=False)

    def __post_init__(self) -> None:
        self.site_digest = self.site_digest or site_digest(self.period.site)

    def day(self, a: int, b: int) -> str:
        """:func:`day_digest` of snapshots a..b−1, computed once."""
        if (a, b) not in self._days:
            self._days[(a, b)] = day_digest(self.period, a, b)
        return self._days[(a, b)]
