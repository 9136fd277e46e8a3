"""Tap verdicts as findings: for the RTU/SCADA or protection and control engineer (and the
network model's owner), never a CT crew. Advisory, like every finding."""

from __future__ import annotations

import numpy as np
import pandas as pd

from calibra.diagnosis.findings import Finding, FindingKind
from calibra.diagnosis.tap_positions import TapVerdict, moved_times
from calibra.model.site import Site
from calibra.model.tap_changers import ratio_step, tap_changers
from calibra.model.times import for_people

#: Likely cause and what to check, per kind of tap finding.
_CAUSE_ACTION = {
    FindingKind.TAP_OFFSET: (
        "tap-position indication offset: encoder or transducer zero, or the step numbering "
        "mapped differently in the RTU or SCADA database",
        "compare the step on the tap changer's local indicator with the SCADA value; check "
        "the RTU scaling or the database's step numbering"),
    FindingKind.TAP_INVERTED: (
        "tap-position indication counts the wrong way: raise/lower or the encoder's sense "
        "reversed in the wiring, RTU or SCADA database",
        "operate the tap changer one step under the utility's switching procedure and check "
        "that the SCADA step moves the same way as the local indicator"),
    FindingKind.TAP_FROZEN: (
        "tap-position indication frozen: a failed transducer, a lost input or a value held "
        "in the RTU or SCADA database",
        "check the tap-position input of the RTU and its quality flags against the local "
        "indicator while the tap changer moves"),
    FindingKind.TAP_STEP_SIZE: (
        "the step size in the network model differs from the one the meters imply (wrong "
        "nameplate value or winding data)",
        "check the transformer's nameplate or test report for the voltage per step and "
        "correct tap_step_pct in network/branches.csv"),
    FindingKind.TAP_UNREPORTED: (
        "an on-load tap changer moves while the network model holds its ratio fixed",
        "add a tap-position point for this transformer (or fix its ratio in the model if the "
        "changer is held on one step); check the automatic voltage control settings"),
}


def _words(v: TapVerdict, neutral: float, pct: float) -> str:
    """The evidence of a telemetered tap's finding."""
    runs = v.runs
    s = np.array([r.step for r in runs])
    u = ratio_step(np.array([r.ratio for r in runs]), neutral, pct)
    base = (f"{len(runs)} runs of constant telemetered step (steps {s.min():g}…{s.max():g}); "
            f"the meters around the transformer imply steps {u.min():.1f}…{u.max():.1f}")
    if v.kind == FindingKind.TAP_OFFSET:
        return (f"{base}: the telemetered step reads {int(v.offset_steps):+d} steps off the "
                "implied one throughout")
    if v.kind == FindingKind.TAP_INVERTED:
        return f"{base}: the implied step moves against the telemetered one (slope {v.slope:.2f})"
    if v.kind == FindingKind.TAP_FROZEN:
        return f"{base}: the telemetered step stays put while the implied one moves"
    return (f"{base}: the implied change per step is {v.slope:.2f} × the modelled "
            f"{pct:g} % (about {v.slope * pct:.3g} % per step)")


def _unreported_words(v: TapVerdict, index: pd.DatetimeIndex, tz: str) -> str:
    r = np.array([x.ratio for x in v.runs])
    lo, hi = np.percentile(r, [5, 95])
    moves = moved_times(v.runs, index, max(0.005, 0.25 * (hi - lo)))
    when = ", ".join(for_people(t, tz, weekday=True) for t in moves[:4])
    more = f" and {len(moves) - 4} more" if len(moves) > 4 else ""
    return (f"no tap-position point; the ratio its meters imply over {len(v.runs)} chunks of "
            f"the period ranges {lo:.4f}…{hi:.4f} (model {r.mean():.4f} on average) and "
            f"steps back and forth {len(moves)} times"
            + (f" (first at {when}{more})" if moves else "")
            + "; the meters around it were judged with the implied ratios")


def tap_findings(site: Site, verdicts: list[TapVerdict], index: pd.DatetimeIndex
                 ) -> list[Finding]:
    """One finding per faulty tap verdict."""
    net, pts = site.network, site.points
    changers = tap_changers(net)
    out = []
    for v in verdicts:
        if v.kind is None:
            continue
        row = net.branches.loc[v.branch]
        sub = str(net.buses.at[str(row["to_bus"]), "substation"])
        cause, action = _CAUSE_ACTION[v.kind]
        runs = v.runs
        n_snap = int(sum(r.snapshots for r in runs))
        f = Finding(tag=v.tag or v.branch, device="", substation=sub, finding=v.kind,
                    confidence=round(v.confidence, 3), evidence="", scope="tap changer",
                    quantity="tap_position", element=v.branch, unit="step", cause=cause,
                    action=action, snapshots_used=n_snap, share_supporting=round(v.confidence, 3),
                    onset=index[runs[0].start] if runs else None,
                    details={"ratios": [r.ratio for r in runs],
                             "starts": [str(index[r.start]) for r in runs]})
        if v.tag:
            pt = pts.loc[v.tag]
            spec = changers.loc[v.branch]
            f.device, f.substation = str(pt["device"]), str(pt["substation"])
            f.rtu, f.channel = (str(pt[c]) if c in pt and pd.notna(pt[c]) else ""
                                for c in ("rtu", "channel"))
            f.evidence = _words(v, float(spec["tap_neutral"]), float(spec["tap_step_pct"]))
        else:
            f.evidence = _unreported_words(v, index, site.timezone)
            f.unit = "ratio"
        if v.kind == FindingKind.TAP_OFFSET:
            f.offset = float(v.offset_steps)
        elif v.kind in (FindingKind.TAP_INVERTED, FindingKind.TAP_STEP_SIZE):
            f.factor = round(float(v.slope), 3)
        elif v.kind == FindingKind.TAP_UNREPORTED:
            ratios = np.array([r.ratio for r in runs])
            f.factor = round(float(ratios.max() / ratios.min()), 4)
        out.append(f)
    return out
