"""Turn per-point diagnoses into findings: device-level conclusions, causes, plain evidence."""

from __future__ import annotations

import numpy as np
import pandas as pd

from calibra.diagnosis.causes import likely_scale_cause
from calibra.diagnosis.classify import PointDiagnosis
from calibra.diagnosis.findings import FACTOR_KINDS, NO_FAULT, Finding, FindingKind
from calibra.model.points import POWER_QUANTITIES, class_limit, quantity_of_words
from calibra.model.site import Site
from calibra.model.times import for_people


def _fmt(x: float, unit: str, signed: bool = True) -> str:
    digits = 2 if abs(x) < 10 else 1
    return f"{x:+,.{digits}f} {unit}" if signed else f"{x:,.{digits}f} {unit}"


def _stamp(ts: pd.Timestamp, tz: str) -> str:
    return for_people(ts, tz, weekday=True)


def _representative_pair(z: np.ndarray, y: np.ndarray) -> tuple[float, float]:
    """A typical snapshot with a well-loaded reading: 75th percentile of |implied|."""
    ok = np.isfinite(z) & np.isfinite(y)
    if not ok.any():
        return float("nan"), float("nan")
    zz, yy = z[ok], y[ok]
    j = int(np.argsort(np.abs(yy))[int(0.75 * (yy.size - 1))])
    return float(zz[j]), float(yy[j])


#: The spread (σ) each way of storing a reading adds: a deadband's lag, a grid's rounding.
_STORAGE_SPREAD = {"deadband": np.sqrt(3.0), "resolution": np.sqrt(12.0)}


def _storage_words(params: dict, unit: str) -> str:
    """'its deadband of 0.50 kV (stated) and resolution of 0.08 kV (from the data)': how the
    reading is stored, where that is a noticeable part (a fifth or more) of the expected
    scatter the finding was judged against ('' when neither is)."""
    stated = params.get("stated", ())
    expected = params.get("expected", 0.0)
    parts = [f"{key} of {_fmt(params[key], unit, False)} "
             f"({'stated' if key in stated else 'from the data'})"
             for key, spread in _STORAGE_SPREAD.items()
             if params.get(key, 0.0) / spread >= 0.2 * expected > 0]
    return "its " + " and ".join(parts) if parts else ""


def _evidence(kind: FindingKind, d: PointDiagnosis, z: np.ndarray, y: np.ndarray, unit: str,
              limit: float, index: pd.DatetimeIndex, tz: str, extra: dict) -> str:
    n = f"{d.n_used:,}"
    share = f"{100 * d.confidence:.1f} %"
    p = d.params
    if kind in FACTOR_KINDS:
        zr, yr = _representative_pair(z, y)
        text = (f"reads {_fmt(zr, unit)} where the network implies {_fmt(yr, unit)}; "
                f"measured ≈ {p['factor']:.3f} × implied in {share} of {n} snapshots")
        return text
    if kind == FindingKind.OFFSET:
        return (f"reads {_fmt(p['offset'], unit)} off the implied value (class limit "
                f"±{_fmt(limit, unit, False)}), consistent in {share} of {n} snapshots")
    if kind == FindingKind.DRIFT:
        onset = index[0] + pd.Timedelta(days=p["onset_days"])
        reach = p["drift_per_day"] * ((index[-1] - onset).total_seconds() / 86400)
        return (f"error grows {_fmt(p['drift_per_day'], unit)}/day from "
                f"{_stamp(onset, tz)}, reaching {_fmt(reach, unit)} (class limit "
                f"±{_fmt(limit, unit, False)}); {n} snapshots")
    if kind == FindingKind.STUCK:
        onset = index[0] + pd.Timedelta(days=p["onset_days"])
        band = _storage_words(p, unit)
        text = (f"frozen at {_fmt(p['value'], unit, False)} from {_stamp(onset, tz)} "
                f"({p['frozen_snapshots']:,} snapshots) while the network implies "
                f"{_fmt(p['implied_min'], unit)} … {_fmt(p['implied_max'], unit)}"
                + (f", beyond {band}" if band else ""))
        return text
    if kind == FindingKind.NOISY:
        band = _storage_words(p, unit)
        return (f"scatters ±{_fmt(p['scatter'], unit, False)} (1σ) around the implied value, "
                f"{p['scatter'] / max(p['expected'], 1e-12):.1f}× what its accuracy class"
                + (f", {band}" if band else "") + f" and the network explain; {n} snapshots")
    if kind == FindingKind.MISMAPPED:
        return (f"follows {extra['matched']} (median difference "
                f"{_fmt(extra['loss'], unit, False)}) rather than its own quantity "
                f"(median difference {_fmt(d.loss_healthy, unit, False)}); {n} snapshots")
    if kind == FindingKind.UNVERIFIABLE:
        if extra.get("reason"):
            return extra["reason"]
        sugg = extra.get("suggestion")
        more = (f"; {sugg} would make it checkable" if sugg else
                "; no single nearby meter would make it checkable")
        return "critical measurement: no other meter checks it" + more
    return ""


_ACTIONS = {
    FindingKind.REVERSED:
        "check CT polarity marks and secondary wiring; check the sign in the RTU/IED",
    FindingKind.SCALE:
        "check CT/VT ratio and tap against the point list; check transducer and RTU scaling",
    FindingKind.OFFSET: "check transducer zero; calibrate",
    FindingKind.DRIFT: "calibrate against a reference meter; replace if out of class",
    FindingKind.STUCK: "check RTU/IED communication and the transducer output",
    FindingKind.NOISY: "check wiring, shielding and earthing; check transducer health",
    FindingKind.MISMAPPED: "check the point mapping in the RTU/IED against the point list",
    FindingKind.UNVERIFIABLE: "check the point against a portable reference meter",
}


def _action(kind: FindingKind, extra: dict) -> str:
    """What to do, in the words of the sheets: an unverifiable point names the meter to add."""
    if kind == FindingKind.UNVERIFIABLE and extra.get("suggestion"):
        return (f"add {extra['suggestion']}; until then check the point against a portable "
                "reference meter")
    return _ACTIONS[kind]


def build_findings(site: Site, ev, diagnoses: dict[str, PointDiagnosis], mismaps: dict,
                   unverifiable: dict) -> list[Finding]:
    """Findings per point, merged to device level where all channels agree."""
    pts = site.points
    model = ev.model
    tz = site.timezone
    findings: list[Finding] = []
    for i, tag in enumerate(model.tags):
        tag = str(tag)
        d = diagnoses[tag]
        extra: dict = {}
        if tag in mismaps:
            kind, extra = FindingKind.MISMAPPED, mismaps[tag]
        elif tag in unverifiable:
            kind, extra = FindingKind.UNVERIFIABLE, unverifiable[tag]
        elif d.kind in NO_FAULT:
            continue
        else:
            kind = FindingKind(d.kind)
        pt = pts.loc[tag]
        unit = str(pt["unit"])
        limit = class_limit(pt)
        z = ev.measured[:, i].astype(float)
        y = ev.implied[:, i].astype(float)
        f = Finding(
            tag=tag, device=str(pt["device"]), substation=str(pt["substation"]), finding=kind,
            confidence=(round(float(d.confidence), 3) if kind != FindingKind.UNVERIFIABLE
                        else 1.0),
            evidence=_evidence(kind, d, z, y, unit, limit, ev.index, tz, extra),
            quantity=str(pt["quantity"]), element=str(pt["element"]), end=str(pt["end"]),
            unit=unit, rtu=str(pt.get("rtu", "")), channel=str(pt.get("channel", "")),
            action=_action(kind, extra), snapshots_used=d.n_used,
            share_supporting=round(float(d.confidence), 3),
        )
        p = d.params
        if kind in FACTOR_KINDS:
            f.factor = round(float(p["factor"]), 4)
            if kind == FindingKind.SCALE:
                f.cause = likely_scale_cause(p["factor"], f.quantity, str(pt.get("ct_ratio", "")))
        elif kind == FindingKind.OFFSET:
            f.offset = float(p["offset"])
        elif kind == FindingKind.DRIFT:
            f.drift_per_day = float(p["drift_per_day"])
            f.onset = ev.index[0] + pd.Timedelta(days=p["onset_days"])
        elif kind == FindingKind.STUCK:
            f.onset = ev.index[0] + pd.Timedelta(days=p["onset_days"])
            if p.get("until_days") is not None:
                f.until = ev.index[0] + pd.Timedelta(days=p["until_days"])
        elif kind == FindingKind.MISMAPPED:
            f.matched = extra["matched"]
            f.confidence = round(float(min(1.0, 1 - extra["loss"] / max(d.loss_healthy, 1e-12))), 3)
        findings.append(f)
    _merge_devices(findings, pts)
    return findings


def _merge_devices(findings: list[Finding], pts: pd.DataFrame) -> None:
    """Mark device-level conclusions: every power channel of a device reversed (CT polarity),
    scaled alike (CT/VT ratio), or P and Q crossed."""
    by_device: dict[str, list[Finding]] = {}
    for f in findings:
        by_device.setdefault(f.device, []).append(f)
    for device, group in by_device.items():
        channels = pts.index[(pts["device"].astype(str) == device)
                             & pts["quantity"].isin(POWER_QUANTITIES)]
        if len(channels) < 2:
            continue
        found = {f.tag: f for f in group if f.quantity in POWER_QUANTITIES}
        if set(found) != set(channels):
            continue
        kinds = {f.finding for f in found.values()}
        if kinds == {FindingKind.REVERSED}:
            for f in found.values():
                f.scope = "device"
                f.cause = "CT polarity reversed: all power channels of the device read negated"
        elif kinds == {FindingKind.SCALE}:
            factors = np.array([f.factor for f in found.values()], float)
            if np.ptp(factors) <= 0.03 * np.abs(factors).mean():
                for f in found.values():
                    f.scope = "device"
                    f.cause = f.cause or "one ratio error on the device's CT or VT"
        elif kinds == {FindingKind.MISMAPPED}:
            read = {t: quantity_of_words(f.matched) for t, f in found.items()}
            crossed = all(read[t] in POWER_QUANTITIES
                          and read[t][0] != f.quantity[0] for t, f in found.items())
            if crossed:
                for f in found.values():
                    f.scope = "device"
                    f.cause = "P and Q channels crossed at the device"
