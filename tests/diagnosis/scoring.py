"""Compare review findings with a simulator's ground truth (test helper)."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd


@dataclass
class Score:
    found: list[str] = field(default_factory=list)
    missed: list[str] = field(default_factory=list)
    wrong_kind: list[tuple[str, str, str]] = field(default_factory=list)
    false_alarms: list[tuple[str, str]] = field(default_factory=list)
    factor_errors: dict[str, float] = field(default_factory=dict)
    onset_errors_h: dict[str, float] = field(default_factory=dict)
    undetectable: list[str] = field(default_factory=list)
    #: RTU clock errors found: RTU → |estimated − seeded offset| in seconds.
    clock_errors_s: dict[str, float] = field(default_factory=dict)

    def line(self) -> str:
        return (f"found {len(self.found)}, missed {len(self.missed)}, wrong kind "
                f"{len(self.wrong_kind)}, false alarms {len(self.false_alarms)}")


def score(findings: pd.DataFrame, truth: pd.DataFrame, detectable: set[str] | None = None) -> Score:
    """Match findings to truth by tag. ``detectable`` limits the truth that must be found
    (e.g. faults whose error exceeds the accuracy class); others are neither required nor
    counted as false alarms."""
    s = Score()
    by_tag = {r.tag: r for r in findings.itertuples()}
    truth_tags = set(truth["tag"])
    for r in truth.itertuples():
        if detectable is not None and r.tag not in detectable:
            s.undetectable.append(r.tag)
            continue
        f = by_tag.get(r.tag)
        if f is None:
            s.missed.append(r.tag)
            continue
        if f.finding != r.kind:
            s.wrong_kind.append((r.tag, r.kind, f.finding))
            continue
        s.found.append(r.tag)
        if r.kind in ("reversed", "scale") and np.isfinite(f.factor):
            s.factor_errors[r.tag] = abs(f.factor / r.factor - 1)
        if r.kind == "time_offset":
            s.clock_errors_s[r.tag] = abs(float(f.offset) - float(r.offset))
        if r.kind in ("drift", "stuck") and pd.notna(f.onset):
            onset = pd.Timestamp(r.onset)
            onset = onset.tz_localize("UTC") if onset.tzinfo is None else onset
            s.onset_errors_h[r.tag] = abs((pd.Timestamp(f.onset) - onset).total_seconds()) / 3600
    for tag, f in by_tag.items():
        if tag not in truth_tags and f.finding != "unverifiable":
            s.false_alarms.append((tag, f.finding))
    return s
