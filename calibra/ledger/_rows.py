"""Conversions between ledger rows and Python objects."""

from __future__ import annotations

import sqlite3

import pandas as pd

from calibra.diagnosis.findings import FINDING_KINDS, Finding
from calibra.ledger import _json
from calibra.ledger._time import from_text, to_text
from calibra.ledger.corrections import Correction
from calibra.ledger.states import Action

#: Finding fields with a column of their own in the findings table; the rest go to ``extra``.
STORED_FIELDS = ("tag", "finding", "device", "substation", "factor", "offset", "drift_per_day",
                 "onset", "confidence", "evidence", "finding_id")


def with_note(payload: dict, note: str) -> dict:
    return {**payload, "note": str(note)} if str(note).strip() else payload


def action(r: sqlite3.Row) -> Action:
    return Action(id=r["id"], at=r["at"], user=r["user"], tag=r["tag"],
                  finding_id=r["finding_id"], kind=r["kind"], payload=_json.loads(r["payload"]),
                  undoes=r["undoes"])


def correction(r: sqlite3.Row) -> Correction:
    return Correction(tag=r["tag"], gain=r["gain"], bias=r["bias"],
                      valid_from=from_text(r["valid_from"]),
                      valid_until=from_text(r["valid_until"]), kind=r["kind"],
                      source_action=r["source_action"])


def stored_values(f: Finding) -> dict:
    """A finding's row for the ``findings`` table (validated)."""
    if not isinstance(f, Finding):
        raise TypeError(f"record_review takes Finding objects, not {type(f).__name__}")
    if not str(f.tag).strip():
        raise ValueError("a finding has an empty tag")
    if f.finding not in FINDING_KINDS:
        raise ValueError(f"{f.tag}: unknown finding kind {f.finding!r}")
    row = f.as_row()
    extra = {k: v for k, v in row.items() if k not in STORED_FIELDS}
    extra["until"] = to_text(f.until, f"{f.tag}: until")
    out = {k: row[k] for k in STORED_FIELDS}
    for name in ("factor", "offset", "drift_per_day", "confidence"):
        value = out[name]
        out[name] = None if value is None or pd.isna(value) else float(value)
    out["onset"] = to_text(f.onset, f"{f.tag}: onset")
    out["extra"] = _json.dumps(extra)
    return out
