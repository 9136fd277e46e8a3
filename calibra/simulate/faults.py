"""Meter faults: what they do to measured values, and the ground-truth table that records them.

A fault is described by a :class:`FaultSpec` and applied to measured values (true value plus
transducer noise), before the historian rounds them and before communication gaps:

- ``reversed``: value × −1 (CT polarity; a whole device, one channel, or an injection);
- ``scale``: value × factor (wrong CT tap: the ratio of two standard taps; VT √3 or 1/√3);
- ``offset``: value + offset; ``drift``: value + rate × days since the onset;
- ``stuck``: the value at the onset, repeated from then on;
- ``noisy``: extra noise so that the total standard deviation is ``noise_factor`` × σ;
- ``mismapped``: the P and Q columns of one device carry each other's values.

Every fault has an onset (default: the first snapshot); values before it are untouched.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from calibra.diagnosis.findings import FACTOR_KINDS, MODEL_KINDS, RTU_KINDS, FindingKind
from calibra.model.points import ANALOG_QUANTITIES, default_sigma

#: Kinds of seeded fault: the finding kinds a fault of the meter itself produces.
FAULT_KINDS = tuple(k for k in FindingKind
                    if k != FindingKind.UNVERIFIABLE and k not in RTU_KINDS
                    and k not in MODEL_KINDS)
TRUTH_COLUMNS = [
    "fault", "tag", "device", "kind", "factor", "offset", "drift_per_day", "onset",
    "noise_factor", "swapped_with", "detail",
]


@dataclass(frozen=True)
class FaultSpec:
    """One meter fault on one or more points (tags).

    ``factor`` is used by ``reversed`` (−1) and ``scale``; ``offset`` and ``drift_per_day``
    are in each point's unit; ``noise_factor`` multiplies σ for ``noisy``; ``onset`` is a
    tz-aware timestamp (None: from the first snapshot); ``detail`` says what happened in the
    field (e.g. which CT tap is wired).
    """

    kind: str
    tags: tuple[str, ...]
    factor: float = 1.0
    offset: float = 0.0
    drift_per_day: float = 0.0
    noise_factor: float = 1.0
    onset: pd.Timestamp | None = None
    detail: str = ""

    def __post_init__(self) -> None:
        if self.kind not in FAULT_KINDS:
            raise ValueError(f"unknown fault kind {self.kind!r}; use one of {FAULT_KINDS}")
        object.__setattr__(self, "tags", tuple(str(t) for t in self.tags))
        if not self.tags:
            raise ValueError(f"{self.kind} fault names no tag")
        if self.kind == FindingKind.MISMAPPED and len(self.tags) != 2:
            raise ValueError(f"mismapped fault needs exactly two tags (P and Q), got {self.tags}")
        if self.kind == FindingKind.NOISY and self.noise_factor < 1.0:
            raise ValueError(f"noisy fault needs noise_factor ≥ 1, got {self.noise_factor}")


def _check(spec: FaultSpec, points: pd.DataFrame) -> None:
    unknown = [t for t in spec.tags if t not in points.index]
    if unknown:
        raise KeyError(f"{spec.kind} fault names tags not in the point list: {unknown}")
    qty = points.loc[list(spec.tags), "quantity"]
    if not qty.isin(ANALOG_QUANTITIES).all():
        raise ValueError(f"{spec.kind} fault on a status point: {list(spec.tags)}")
    if spec.kind == FindingKind.MISMAPPED:
        pair = set(qty.str[:2])
        devices = set(points.loc[list(spec.tags), "device"])
        if pair != {"p_", "q_"} or len(devices) != 1:
            raise ValueError(f"mismapped fault needs the P and Q tags of one device: {spec.tags}")


def apply_faults(
    values: pd.DataFrame,
    points: pd.DataFrame,
    specs,
    rng: np.random.Generator,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Apply ``specs`` to ``values`` (snapshots × tags); return faulted values and the truth table.

    The truth table has one row per faulted tag with columns :data:`TRUTH_COLUMNS`.
    """
    out = values.copy()
    index = values.index
    sigma = default_sigma(points)
    seen: set[str] = set()
    rows = []
    for number, spec in enumerate(specs, start=1):
        _check(spec, points)
        clash = seen.intersection(spec.tags)
        if clash:
            raise ValueError(f"tags {sorted(clash)} carry more than one fault")
        seen.update(spec.tags)
        onset = index[0] if spec.onset is None else pd.Timestamp(spec.onset)
        if onset.tzinfo is None:
            raise ValueError(f"fault onset {onset} must be tz-aware")
        after = np.asarray(index >= onset)
        if not after.any():
            raise ValueError(f"fault onset {onset} is after the last snapshot")
        first = int(np.argmax(after))
        tags = list(spec.tags)
        block = out.loc[after, tags].to_numpy(float)
        if spec.kind in FACTOR_KINDS:
            block = block * spec.factor
        elif spec.kind == FindingKind.OFFSET:
            block = block + spec.offset
        elif spec.kind == FindingKind.DRIFT:
            days = np.asarray((index[after] - onset) / pd.Timedelta(days=1), float)
            block = block + spec.drift_per_day * days[:, None]
        elif spec.kind == FindingKind.STUCK:
            block = np.broadcast_to(out.iloc[first][tags].to_numpy(float), block.shape).copy()
        elif spec.kind == FindingKind.NOISY:
            extra = sigma[tags].to_numpy(float) * np.sqrt(spec.noise_factor**2 - 1.0)
            block = block + rng.standard_normal(block.shape) * extra[None, :]
        elif spec.kind == FindingKind.MISMAPPED:
            block = block[:, ::-1]
        out.loc[after, tags] = block
        for i, tag in enumerate(tags):
            rows.append({
                "fault": number, "tag": tag, "device": points.at[tag, "device"],
                "kind": spec.kind,
                "factor": spec.factor if spec.kind in FACTOR_KINDS else 1.0,
                "offset": spec.offset if spec.kind == FindingKind.OFFSET else 0.0,
                "drift_per_day": spec.drift_per_day if spec.kind == FindingKind.DRIFT else 0.0,
                "onset": index[first],
                "noise_factor": spec.noise_factor if spec.kind == FindingKind.NOISY else 1.0,
                "swapped_with": tags[1 - i] if spec.kind == FindingKind.MISMAPPED else "",
                "detail": spec.detail,
            })
    truth = pd.DataFrame(rows, columns=TRUTH_COLUMNS)
    return out, truth
