"""Random fault mixes for any network: N faults of chosen kinds on eligible points.

A point is eligible for a fault when the fault would show in its values (a reversed flow of
almost zero would not) and when it is not in ``exclude`` (e.g. critical points, whose errors
no estimator can see). Faults never share a device. Sizes are drawn relative to each point's
σ so that they stand out of the noise: offsets 10–20 σ, drifts reaching 15–30 σ by the end,
noisy transducers 4–7 σ (our own choice of test sizes; common practice, no source).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from calibra.diagnosis.findings import FindingKind
from calibra.model.points import (
    ANALOG_QUANTITIES,
    BRANCH_END_QUANTITIES,
    FLOW_QUANTITIES,
    INJECTION_QUANTITIES,
    default_sigma,
    parse_ratio,
)
from calibra.simulate.faults import FAULT_KINDS, FaultSpec
from calibra.simulate.metering import CT_SECONDARY_A, MULTI_RATIO_CT_TAPS

DEFAULT_MIX = FAULT_KINDS


def _round2(x: float) -> float:
    return float(f"{x:.2g}")


def wrong_ct_taps(
    ct_ratio: str, factors: tuple[float, float] = (1.2, 2.5)
) -> list[tuple[int, int]]:
    """(configured, wired) primaries for a CT whose configured tap is a standard tap.

    The wired tap is another tap of the same IEEE C57.13 multi-ratio CT such that the scale
    error configured/wired (or its inverse) lies within ``factors``.
    """
    ratio = parse_ratio(ct_ratio) if ct_ratio else None
    if ratio is None:
        return []
    configured = int(round(ratio * CT_SECONDARY_A))
    lo, hi = factors
    for taps in MULTI_RATIO_CT_TAPS.values():
        if configured in taps:
            return [(configured, t) for t in taps
                    if lo <= max(configured / t, t / configured) <= hi]
    return []


class _Picker:
    def __init__(self, points, values, rng, exclude):
        self.points = points
        self.rng = rng
        self.sigma = default_sigma(points)
        analog = points.index[points["quantity"].isin(ANALOG_QUANTITIES)]
        vals = values[analog.intersection(values.columns)]
        self.level = vals.abs().median()
        self.spread = vals.std()
        self.used_devices: set[str] = set()
        self.exclude = set(exclude)
        self.by_device = {d: g for d, g in points.groupby("device")}

    def significant(self, tag: str, times: float = 8.0) -> bool:
        return bool(self.level.get(tag, 0.0) >= times * self.sigma[tag])

    def free(self, tags) -> bool:
        return not (set(tags) & self.exclude) and all(
            self.points.at[t, "device"] not in self.used_devices for t in tags
        )

    def take(self, tags) -> None:
        self.used_devices.update(self.points.loc[list(tags), "device"])

    def devices(self, quantities: tuple[str, str]) -> list[tuple[str, pd.DataFrame]]:
        out = []
        for dev, g in self.by_device.items():
            q = set(g["quantity"])
            if set(quantities) <= q:
                out.append((dev, g))
        return [out[i] for i in self.rng.permutation(len(out))]

    def tags_of(self, quantities) -> list[str]:
        tags = self.points.index[self.points["quantity"].isin(quantities)]
        return [tags[i] for i in self.rng.permutation(len(tags))]


def random_faults(
    points: pd.DataFrame,
    values: pd.DataFrame,
    kinds: Sequence[str] = DEFAULT_MIX,
    *,
    rng: np.random.Generator,
    exclude=(),
    onset_window: tuple[float, float] = (0.15, 0.6),
) -> list[FaultSpec]:
    """Pick one fault per entry of ``kinds`` on eligible points of ``points``.

    ``values``: noise-free values (snapshots × tags, tz-aware index) used to judge whether a
    fault would show. Repeated kinds rotate through their variants (reversed: device, single
    channel, injection; scale: CT tap, VT √3). Raises ValueError when a kind finds no point.
    """
    unknown = [k for k in kinds if k not in FAULT_KINDS]
    if unknown:
        raise ValueError(f"unknown fault kinds {unknown}; use {FAULT_KINDS}")
    pick = _Picker(points, values, rng, exclude)
    index = values.index
    counts: dict[str, int] = {}
    specs = []
    order = (FindingKind.MISMAPPED, FindingKind.SCALE, FindingKind.REVERSED, FindingKind.STUCK,
             FindingKind.DRIFT)
    priority = {k: i for i, k in enumerate(order)}
    for kind in sorted(kinds, key=lambda k: priority.get(k, 9)):
        variant = counts.get(kind, 0)
        counts[kind] = variant + 1
        lo, hi = onset_window
        onset = index[int(rng.uniform(lo, hi) * (len(index) - 1))]
        spec = _pick_one(pick, kind, variant, onset, index)
        if spec is None:
            raise ValueError(f"no eligible point left for a {kind!r} fault")
        pick.take(spec.tags)
        specs.append(spec)
    return specs


def _pick_one(pick: _Picker, kind: str, variant: int, onset, index) -> FaultSpec | None:
    sig = pick.sigma
    if kind == FindingKind.MISMAPPED:
        for _, g in pick.devices(FLOW_QUANTITIES):
            p, q = g.index[g["quantity"] == "p_flow"][0], g.index[g["quantity"] == "q_flow"][0]
            gap = (pick.level[p] - pick.level[q]) if p in pick.level else 0.0
            if pick.free([p, q]) and abs(gap) >= 10 * max(sig[p], sig[q]):
                return FaultSpec(FindingKind.MISMAPPED, (p, q),
                                 detail="P and Q wired to each other's inputs")
        return None
    if kind == FindingKind.REVERSED:
        for attempt in range(3):
            spec = _reversed(pick, (variant + attempt) % 3)
            if spec is not None:
                return spec
        return None
    if kind == FindingKind.SCALE:
        return _scale(pick, variant % 2) or _scale(pick, (variant + 1) % 2)
    for tag in pick.tags_of(ANALOG_QUANTITIES):
        if not pick.free([tag]) or tag not in pick.level:
            continue
        s = sig[tag]
        sign = 1.0 if pick.rng.random() < 0.5 else -1.0
        if kind == FindingKind.OFFSET:
            return FaultSpec(FindingKind.OFFSET, (tag,),
                             offset=_round2(sign * pick.rng.uniform(10, 20) * s),
                             detail="zero of the transducer shifted")
        if kind == FindingKind.NOISY:
            k = float(np.round(pick.rng.uniform(4, 7) * 2) / 2)
            return FaultSpec(FindingKind.NOISY, (tag,), noise_factor=k, detail="failing transducer")
        if kind == FindingKind.DRIFT:
            days = (index[-1] - onset) / pd.Timedelta(days=1)
            rate = _round2(sign * pick.rng.uniform(15, 30) * s / max(days, 1e-3))
            return FaultSpec(FindingKind.DRIFT, (tag,), drift_per_day=rate, onset=onset,
                             detail="transducer drifting")
        if kind == FindingKind.STUCK:
            if pick.spread.get(tag, 0.0) >= 6 * s:
                return FaultSpec(FindingKind.STUCK, (tag,), onset=onset, detail="value frozen")
    return None


def _reversed(pick: _Picker, variant: int) -> FaultSpec | None:
    if variant == 1:
        for tag in pick.tags_of(FLOW_QUANTITIES):
            if pick.free([tag]) and pick.significant(tag):
                return FaultSpec(FindingKind.REVERSED, (tag,), factor=-1.0,
                                 detail="one channel wired with reversed polarity")
        return None
    quantities = FLOW_QUANTITIES if variant == 0 else INJECTION_QUANTITIES
    for _, g in pick.devices(quantities):
        tags = list(g.index[g["quantity"].isin(quantities)])
        p = g.index[g["quantity"] == quantities[0]][0]
        if pick.free(tags) and pick.significant(p):
            what = "CT polarity reversed" if variant == 0 else "injection sign convention reversed"
            return FaultSpec(FindingKind.REVERSED, tuple(tags), factor=-1.0, detail=what)
    return None


def _scale(pick: _Picker, variant: int) -> FaultSpec | None:
    if variant == 1:
        for tag in pick.tags_of(("v_magnitude",)):
            if pick.free([tag]):
                up = pick.rng.random() < 0.5
                factor = float(np.sqrt(3.0)) if up else float(1.0 / np.sqrt(3.0))
                what = "VT connected line-to-line, configured line-to-neutral" if up else (
                    "VT connected line-to-neutral, configured line-to-line")
                return FaultSpec(FindingKind.SCALE, (tag,), factor=factor, detail=what)
        return None
    for _, g in pick.devices(FLOW_QUANTITIES):
        tags = list(g.index[g["quantity"].isin(BRANCH_END_QUANTITIES)])
        p = g.index[g["quantity"] == "p_flow"][0]
        pairs = wrong_ct_taps(str(g["ct_ratio"].iloc[0]))
        if not pairs or not pick.free(tags):
            continue
        configured, wired = pairs[int(pick.rng.integers(len(pairs)))]
        factor = configured / wired
        if abs(factor - 1.0) * pick.level.get(p, 0.0) >= 8 * pick.sigma[p]:
            return FaultSpec(
                FindingKind.SCALE, tuple(tags), factor=factor,
                detail=f"CT wired on the {wired}:{CT_SECONDARY_A} tap, "
                       f"configured {configured}:{CT_SECONDARY_A}",
            )
    return None
