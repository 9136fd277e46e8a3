"""Software corrections of telemetry points and their application to snapshots.

A correction says: for timestamps t with ``valid_from <= t < valid_until`` the true value of
the point is ``gain × raw + bias``. An open start (``valid_from`` None) reaches back to the
first snapshot; an open end (``valid_until`` None) means the correction is still in force.
How findings translate into corrections:

- reversed polarity (measured = −true): gain −1, bias 0;
- scale (measured = k × true): gain 1/k, bias 0;
- offset (measured = true + c): gain 1, bias −c.

This module is pure: no SQL, no files. The ledger stores corrections; this applies them.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass

import numpy as np
import pandas as pd

from calibra.diagnosis.findings import CORRECTABLE_KINDS

#: Kinds of correction, as recorded in the ledger: the finding kinds a correction undoes.
CORRECTION_KINDS = CORRECTABLE_KINDS


@dataclass(frozen=True)
class Correction:
    """One software correction of one point over a time window."""

    tag: str
    gain: float
    bias: float
    valid_from: pd.Timestamp | None = None
    valid_until: pd.Timestamp | None = None
    kind: str = ""
    source_action: int | None = None

    def __post_init__(self) -> None:
        if not (math.isfinite(self.gain) and self.gain != 0.0):
            raise ValueError(f"correction of {self.tag!r}: gain must be finite and non-zero")
        if not math.isfinite(self.bias):
            raise ValueError(f"correction of {self.tag!r}: bias must be finite")
        for name in ("valid_from", "valid_until"):
            value = getattr(self, name)
            if value is not None and value.tzinfo is None:
                raise ValueError(f"correction of {self.tag!r}: {name} needs a timezone")

    def is_open(self) -> bool:
        """Still in force (no end)."""
        return self.valid_until is None

    def covers(self, at: pd.Timestamp) -> bool:
        """Whether the instant ``at`` lies in [valid_from, valid_until)."""
        after_start = self.valid_from is None or at >= self.valid_from
        before_end = self.valid_until is None or at < self.valid_until
        return after_start and before_end

    def overlaps(self, start: pd.Timestamp, end: pd.Timestamp) -> bool:
        """Whether the window shares any instant with [start, end)."""
        starts_before_end = self.valid_from is None or self.valid_from < end
        ends_after_start = self.valid_until is None or self.valid_until > start
        return starts_before_end and ends_after_start

    def apply(self, raw: float) -> float:
        return self.gain * raw + self.bias


def apply_corrections(
    snapshots: pd.DataFrame, corrections: Iterable[Correction], *, missing: str = "raise"
) -> pd.DataFrame:
    """A corrected copy of ``snapshots`` (index: tz-aware timestamps; one column per tag).

    Each correction changes its tag's column inside its time window only. Several corrections
    of one tag valid at the same instant are applied one after another, in the order given
    (the ledger gives them in the order they were recorded). A correction for a tag that is
    not a column raises ``KeyError`` unless ``missing="ignore"``. Missing values stay missing.
    """
    if missing not in ("raise", "ignore"):
        raise ValueError(f"missing must be 'raise' or 'ignore', not {missing!r}")
    if not isinstance(snapshots.index, pd.DatetimeIndex) or snapshots.index.tz is None:
        raise ValueError("snapshots need a tz-aware DatetimeIndex to apply corrections by time")
    corrections = list(corrections)
    absent = sorted({c.tag for c in corrections} - set(snapshots.columns))
    if absent and missing == "raise":
        raise KeyError(f"corrections for tags that are not in the snapshots: {', '.join(absent)}")
    out = snapshots.copy()
    times = snapshots.index
    for c in corrections:
        if c.tag not in out.columns:
            continue
        mask = np.ones(len(times), dtype=bool)
        if c.valid_from is not None:
            mask &= times >= c.valid_from
        if c.valid_until is not None:
            mask &= times < c.valid_until
        values = out[c.tag].to_numpy(dtype=float, copy=True)
        values[mask] = c.gain * values[mask] + c.bias
        out[c.tag] = values
    return out
