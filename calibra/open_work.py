"""Field work that outlives one review: what the ledger still holds open, and repairs judged on
the data after them.

A software correction is a stop-gap until the field fix: a corrected finding is no longer seen by
the review (its data are corrected), yet its CT or transducer is still wrong. Such findings, and
confirmed ones, stay in findings.csv and on the work orders until they are marked repaired
(``carried_findings``). A repair whose time falls inside the reviewed period is judged on the
data after it: the point's earlier data are left out of the review (``judge_after_repairs``), so
the review finds the fault again (the repair did not clear it: reopened) or not (verified).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from calibra.diagnosis.findings import FACTOR_KINDS, MODEL_KINDS, FindingKind
from calibra.ledger import Ledger
from calibra.ledger.corrections import Correction
from calibra.ledger.states import FindingState
from calibra.model.times import for_people

#: Ledger states whose findings stay on the field work when the review does not see them.
CARRIED_STATES = (FindingState.CONFIRMED, FindingState.CORRECTED)
_CORRECTION_WORDS = {FindingKind.REVERSED: "sign reversed", FindingKind.SCALE: "scaled",
                     FindingKind.OFFSET: "offset removed"}


def repairs_inside(ledger: Ledger, start: pd.Timestamp,
                   end: pd.Timestamp) -> dict[str, pd.Timestamp]:
    """Tags with a finding marked repaired at a time inside (start, end]: tag → repair time."""
    repaired = ledger.findings(state=FindingState.REPAIRED)
    out: dict[str, pd.Timestamp] = {}
    for tag, at in zip(repaired["tag"], repaired["repaired_at"], strict=True):
        if pd.notna(at) and start < at <= end:
            out[str(tag)] = max(at, out.get(str(tag), at))
    return out


def judge_after_repairs(snaps: pd.DataFrame, repairs: dict[str, pd.Timestamp]) -> pd.DataFrame:
    """The snapshots with each repaired point's values before its repair time left out."""
    if not repairs:
        return snaps
    snaps = snaps.copy()
    for tag, at in repairs.items():
        if tag in snaps.columns:
            snaps.loc[snaps.index < at, tag] = np.nan
    return snaps


def _correction_text(c: Correction, applied: pd.Timestamp | None, timezone: str) -> str:
    what = _CORRECTION_WORDS.get(c.kind, "corrected")
    detail = (f"gain {c.gain:g}" if c.kind in FACTOR_KINDS else f"bias {c.bias:g}")
    when = f", entered {for_people(applied, timezone)}" if applied is not None else ""
    if c.valid_from is not None:
        return f"corrected in software since {for_people(c.valid_from, timezone)} ({what}, " \
               f"{detail}{when})"
    return f"corrected in software since the first data ({what}, {detail}{when})"


def carried_findings(ledger: Ledger, seen: pd.Series, corrections: list[Correction],
                     timezone: str) -> pd.DataFrame:
    """Ledger findings still open for the field (confirmed, or corrected in software) that
    this review did not list (``seen``: its finding ids), with the evidence saying why they
    stay: the correction since when, and that the field fix is still due."""
    known = ledger.findings()
    keep = known[known["state"].isin(CARRIED_STATES) & ~known.index.isin(set(seen))]
    if keep.empty:
        return keep.reset_index().iloc[0:0]
    by_tag: dict[str, list[Correction]] = {}
    for c in corrections:
        by_tag.setdefault(c.tag, []).append(c)
    entered = ledger.history()["at"] if corrections else pd.Series(dtype=object)
    rows = keep.reset_index()
    notes = []
    for tag, state, evidence, kind in zip(rows["tag"], rows["state"], rows["evidence"],
                                          rows["finding"], strict=True):
        fixes = by_tag.get(str(tag), [])
        if kind in MODEL_KINDS and state == FindingState.CORRECTED:
            notes.append(f"corrected in the reviews' model (model-corrections.csv): update the "
                         f"network model at its source, then mark it repaired (when last "
                         f"found: {evidence})")
        elif kind in MODEL_KINDS:
            notes.append(f"confirmed, not seen in this review: check the model's value (when "
                         f"last found: {evidence})")
        elif state == FindingState.CORRECTED and fixes:
            head = "; ".join(_correction_text(c, entered.get(c.source_action), timezone)
                             for c in fixes)
            notes.append(f"{head}: the field fix is still due (when last found: {evidence})")
        elif state == FindingState.CORRECTED:
            notes.append(f"corrected in software: the field fix is still due (when last found: "
                         f"{evidence})")
        else:
            notes.append(f"confirmed, not seen in this review: check it in the field (when last "
                         f"found: {evidence})")
    rows["evidence"] = notes
    return rows


def reopened_evidence(table: pd.DataFrame, timezone: str) -> pd.Series:
    """Evidence of the findings, led by "the repair on … did not clear it" where a review
    reopened a repaired finding."""
    if "reopened" not in table.columns or table.empty:
        return table["evidence"]
    out = table["evidence"].astype(str).copy()
    for pos, (why, at) in enumerate(zip(table["reopened"], table.get("repaired_at", [None] *
                                                                       len(table)), strict=True)):
        if isinstance(why, str) and why:
            if pd.notna(at) and "repair did not clear" in why:
                head = f"the repair on {for_people(at, timezone)} did not clear it (data after it)"
            else:
                head = f"reopened: {why}"
            if not out.iloc[pos].startswith(head):
                out.iloc[pos] = f"{head}; {out.iloc[pos]}"
    return out
