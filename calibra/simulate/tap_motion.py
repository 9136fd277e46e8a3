"""Moving on-load tap changers for simulated weeks, with or without tap telemetry, and faults
of the tap-position points.

A chosen transformer gets a tap changer (our own choice of values: ``step_pct`` per step, a
neutral step of 0 or 9, the tapped side drawn at random) whose step follows the week's total
load with a hysteresis of 0.7 step, so it moves a few steps up and down each day, as an
automatic voltage control does (common practice, no source). The true ratio per snapshot is
carried into the power flow as the branch-state factor (:mod:`calibra.model.network`).

With telemetry the point list gets a ``tap_position`` point per transformer; its reported step
may be faulty: ``tap_offset`` (read ``offset_steps`` high), ``tap_inverted`` (mirrored about
the neutral step), ``tap_frozen`` (the first step all week) or ``tap_step_size`` (the site's
model states ``model_step_factor`` × the true step size). Without telemetry the model holds the
transformer's ratio fixed (truth kind ``tap_unreported``, tag the branch).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from calibra.diagnosis.findings import TAP_KINDS, FindingKind
from calibra.model.network import TAP_CHANGER_COLUMNS, Network
from calibra.model.points import FLOW_QUANTITIES, TAP_QUANTITY
from calibra.model.tap_changers import TappedSide, model_side_ratio, step_ratio

#: Tap-point faults the simulator can seed.
TAP_POINT_FAULTS = tuple(k for k in TAP_KINDS if k != FindingKind.TAP_UNREPORTED)
HYSTERESIS_STEPS = 0.7


@dataclass(frozen=True)
class OltcOptions:
    """Moving tap changers of a simulated week (``transformers`` 0: none)."""

    transformers: int = 1
    telemetered: bool = True
    fault: str = ""  #: one of :data:`TAP_POINT_FAULTS`, on the first telemetered changer
    offset_steps: int = 2
    model_step_factor: float = 2.0
    step_pct: float = 1.25
    swing_steps: int = 4  #: steps the load swing moves the tap each way
    branches: tuple[str, ...] = ()  #: transformers to use (default: drawn among metered ones)

    def __post_init__(self) -> None:
        if self.fault and self.fault not in TAP_POINT_FAULTS:
            raise ValueError(f"unknown tap fault {self.fault!r}; use one of {TAP_POINT_FAULTS}")
        if self.fault and not self.telemetered:
            raise ValueError("a tap-position fault needs telemetered taps")


@dataclass
class TapMotion:
    """The tap changers' true motion and what the site reports of it."""

    branches: list[str]
    steps: np.ndarray  # k × changers, true steps
    factors: np.ndarray  # k × n_branch, true branch-state factors
    network: Network  # the true network with its tap-changer columns
    model_columns: pd.DataFrame  # tap-changer columns of the site's model (branch-indexed)
    points: pd.DataFrame  # tap-position points (empty without telemetry)
    reported: pd.DataFrame  # reported steps (k × tap tags)
    truth: list[dict] = field(default_factory=list)


def _metered_transformers(network: Network, points: pd.DataFrame) -> list[str]:
    """Transformers without phase shift with a flow meter on them."""
    br = network.branches
    shift = br["shift_deg"].fillna(0.0).to_numpy(float)
    trafo = br.index[(br["kind"] == "transformer").to_numpy() & (shift == 0)]
    flows = points[points["quantity"].isin(FLOW_QUANTITIES)]
    metered = set(flows["element"].astype(str))
    return [b for b in trafo if b in metered]


def tap_steps(load: np.ndarray, swing: int, direction: int) -> np.ndarray:
    """Steps from the base step (integers) following the load with hysteresis."""
    lo, hi = np.percentile(load, [2, 98])
    u = np.clip(2.0 * (load - lo) / max(hi - lo, 1e-9) - 1.0, -1.0, 1.0)
    target = direction * swing * u
    out = np.empty(len(load), int)
    now = int(np.round(target[0]))
    for i, x in enumerate(target):
        if x - now > HYSTERESIS_STEPS:
            now += 1
        elif now - x > HYSTERESIS_STEPS:
            now -= 1
        out[i] = now
    return out


def _tag(network: Network, branch: str) -> tuple[str, str]:
    bus = str(network.branches.at[branch, "to_bus"])
    sub = str(network.buses.at[bus, "substation"])
    code = "".join(ch for ch in sub.upper() if ch.isalnum())[:6] or bus
    return f"{code}.{branch}.TAP", sub


def moving_taps(network: Network, points: pd.DataFrame, load: np.ndarray, options: OltcOptions,
                rng: np.random.Generator) -> TapMotion:
    """Choose the transformers, move their taps over the week and report the steps."""
    k = len(load)
    chosen = list(options.branches) or _metered_transformers(network, points)
    if not options.branches:
        chosen = [chosen[i] for i in rng.permutation(len(chosen))[:options.transformers]]
    true = Network(network.name, network.base_mva, network.buses.copy(),
                   network.branches.copy(), network.reference_bus, network.frequency_hz)
    br = true.branches
    for c in TAP_CHANGER_COLUMNS:
        if c not in br:
            br[c] = "" if c == "tap_side" else np.nan
    steps = np.zeros((k, len(chosen)), int)
    factors = np.ones((k, true.n_branch))
    rows, reported, truth = [], {}, []
    for j, branch in enumerate(chosen):
        side = TappedSide.FROM if rng.random() < 0.5 else TappedSide.TO
        neutral = 0 if rng.random() < 0.5 else 9
        pct = options.step_pct
        t0 = float(br.at[branch, "tap"]) or 1.0
        base = neutral + (int(np.round((t0 - 1.0) * 100.0 / pct)) if side == TappedSide.FROM
                          else 0)
        if side == TappedSide.FROM:
            br.at[branch, "tap"] = float(step_ratio(base, neutral, pct))
        br.loc[branch, ["tap_step_pct", "tap_neutral", "tap_side"]] = [pct, neutral, side.value]
        direction = 1 if rng.random() < 0.5 else -1
        steps[:, j] = base + tap_steps(load, options.swing_steps, direction)
        b = int(true.branch_positions([branch])[0])
        factors[:, b] = step_ratio(steps[:, j], neutral, pct) / model_side_ratio(true, branch)
        if not options.telemetered:
            truth.append({"tag": branch, "kind": FindingKind.TAP_UNREPORTED,
                          "detail": f"tap moves over steps {steps[:, j].min()}…"
                                    f"{steps[:, j].max()}, no tap-position point"})
            continue
        tag, sub = _tag(true, branch)
        rtus = points.loc[points["substation"] == sub, "rtu"].dropna().astype(str) \
            if "rtu" in points else pd.Series(dtype=str)
        rows.append({"tag": tag, "quantity": TAP_QUANTITY, "element": branch, "end": "",
                     "unit": "step", "full_scale": np.nan, "accuracy_pct": np.nan,
                     "substation": sub, "device": "",
                     "rtu": rtus.iloc[0] if len(rtus) else "", "channel": np.nan})
        seen = steps[:, j].astype(float)
        if options.fault and j == 0:
            seen, row = _faulty(seen, neutral, options)
            truth.append({"tag": tag, **row})
        reported[tag] = seen
    model = br.reindex(columns=TAP_CHANGER_COLUMNS).copy()
    if options.fault == FindingKind.TAP_STEP_SIZE and rows:
        model.at[chosen[0], "tap_step_pct"] = options.step_pct * options.model_step_factor
    pts = pd.DataFrame(rows).set_index("tag") if rows else pd.DataFrame()
    return TapMotion(chosen, steps, factors, true, model, pts,
                     pd.DataFrame(reported), truth)


def _faulty(steps: np.ndarray, neutral: int, options: OltcOptions) -> tuple[np.ndarray, dict]:
    kind = FindingKind(options.fault)
    if kind == FindingKind.TAP_OFFSET:
        return steps + options.offset_steps, {
            "kind": kind, "offset": float(options.offset_steps),
            "detail": f"tap position reads {options.offset_steps:+d} steps"}
    if kind == FindingKind.TAP_INVERTED:
        return 2.0 * neutral - steps, {"kind": kind, "factor": -1.0,
                                       "detail": "tap position counts the wrong way"}
    if kind == FindingKind.TAP_FROZEN:
        return np.full_like(steps, steps[0]), {"kind": kind,
                                               "detail": f"tap position frozen at {steps[0]:g}"}
    return steps, {"kind": kind, "factor": 1.0 / options.model_step_factor,
                   "detail": f"model states {options.model_step_factor:g} × the true step size"}
