"""States of a finding and the replay of the action log that determines them.

The action log is the record of truth. A finding's state, and the corrections of a tag, are
what replaying the tag's actions gives; the ledger caches both and rebuilds them with
:func:`replay_tag` after every write.

States::

    new ─confirm─▶ confirmed ─correction─▶ corrected ─repair─▶ repaired ─verify─▶ verified
    (new and confirmed may also be corrected or repaired directly)
    any state ─dismiss─▶ dismissed ─confirm─▶ confirmed
    model findings: new/confirmed ─set_model─▶ corrected (the value in model-corrections.csv;
    the network model at its source still to update) ─repair─▶ repaired;
    any state ─keep_model─▶ dismissed (the model's value is right: its meters are the suspects)

``reopen`` (automatic) brings a dismissed finding whose fitted values changed materially, or a
repaired finding found again in the data after the repair, back to ``new``, flagged with the
reason (:attr:`FindingStatus.reopened`, e.g. "the repair on … did not clear it") until it is
repaired again, dismissed or verified. An ``undo`` action takes the action it names out of the
replay; a note changes no state.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from enum import StrEnum

import pandas as pd

from calibra.diagnosis.findings import FindingKind
from calibra.ledger._time import from_text
from calibra.ledger.corrections import Correction


class FindingState(StrEnum):
    """A finding's state in the ledger (members equal the strings the ledger file stores)."""

    NEW = "new"
    CONFIRMED = "confirmed"
    CORRECTED = "corrected"
    REPAIRED = "repaired"
    VERIFIED = "verified"
    DISMISSED = "dismissed"


#: Every state, in the order of the workflow (the lists sort by it).
STATES = tuple(FindingState)

#: Action kinds that act on every finding of a tag (and on the tag's corrections).
CORRECTION_ACTIONS = {"mark_reversed": FindingKind.REVERSED, "apply_scale": FindingKind.SCALE,
                      "apply_offset": FindingKind.OFFSET}
TAG_ACTIONS = (*CORRECTION_ACTIONS, "mark_repaired")
#: Actions of the network model's owner on a model finding (each writes one row of
#: model-corrections.csv, which an undo takes out again).
MODEL_ACTIONS = ("set_model", "keep_model")
#: Finding kinds never corrected in software, and where they are set right instead.
NOT_IN_SOFTWARE = {FindingKind.TIME_OFFSET: "an RTU clock is set right in the RTU",
                   FindingKind.MODEL: "a network-model value is corrected in the model "
                                      "(model-corrections.csv)"}
#: Actions written by the review itself (user "calibra").
AUTOMATIC_ACTIONS = ("found", "verify", "reopen")
#: Actions an undo may not target: the first sighting of a finding, and undos themselves.
NOT_UNDOABLE = ("found", "undo")

#: Open findings: found, agreed, or corrected in software only — the field fix is still due
#: (the work orders, the ledger's list). Repaired findings wait for verification; dismissed
#: and verified are closed.
OPEN_STATES = (FindingState.NEW, FindingState.CONFIRMED, FindingState.CORRECTED)
#: Open findings the engineer has not acted on yet: neither corrected in software nor
#: repaired (what the desktop application highlights and offers to correct).
AWAITING_ACTION_STATES = (FindingState.NEW, FindingState.CONFIRMED)
_OPEN = OPEN_STATES
#: Actions after which a reopened finding no longer carries the reopen reason.
_CLEARS_REOPENED = ("mark_repaired", "dismiss", "verify")
_TRANSITIONS: dict[str, dict[str | None, FindingState]] = {
    "found": {None: FindingState.NEW},
    "confirm": {FindingState.NEW: FindingState.CONFIRMED,
                FindingState.DISMISSED: FindingState.CONFIRMED},
    **{kind: {s: FindingState.CORRECTED for s in _OPEN} for kind in CORRECTION_ACTIONS},
    "mark_repaired": {s: FindingState.REPAIRED for s in _OPEN},
    "set_model": {FindingState.NEW: FindingState.CORRECTED,
                  FindingState.CONFIRMED: FindingState.CORRECTED},
    "keep_model": {s: FindingState.DISMISSED for s in STATES if s != FindingState.DISMISSED},
    "dismiss": {s: FindingState.DISMISSED for s in STATES if s != FindingState.DISMISSED},
    "verify": {FindingState.REPAIRED: FindingState.VERIFIED},
    "reopen": {FindingState.DISMISSED: FindingState.NEW, FindingState.REPAIRED: FindingState.NEW},
    "note": {s: s for s in STATES},
}

#: Relative change of a fitted value (factor, offset, drift per day) that reopens a dismissed
#: finding. A missing value becoming present, or the reverse, also counts.
MATERIAL_CHANGE = 0.2
FITTED_VALUES = ("factor", "offset", "drift_per_day")


def next_state(state: str | None, kind: str) -> FindingState | None:
    """State after an action of ``kind``; None when the action does not apply in ``state``."""
    return _TRANSITIONS.get(kind, {}).get(state)


@dataclass(frozen=True)
class Action:
    """One row of the action log."""

    id: int
    at: str
    user: str
    tag: str
    finding_id: str | None
    kind: str
    payload: dict = field(default_factory=dict)
    undoes: int | None = None


@dataclass
class FindingStatus:
    """What replaying the log says about one finding."""

    state: FindingState
    repaired_at: pd.Timestamp | None = None
    dismissed_values: dict | None = None
    reopened: str = ""  #: why the review reopened it ("" when it was not, or no longer is)


def replay_tag(actions: Iterable[Action]) -> tuple[dict[str, FindingStatus], list[Correction]]:
    """States of a tag's findings and the tag's corrections, from the tag's actions.

    Actions apply in id order; undone actions and undo actions are skipped. An action naming a
    finding acts on it alone; a tag-wide action acts on the findings seen before it. An action
    that does not apply in a finding's state leaves that finding as it is.
    """
    actions = sorted(actions, key=lambda a: a.id)
    undone = {a.undoes for a in actions if a.kind == "undo"}
    statuses: dict[str, FindingStatus] = {}
    corrections: list[Correction] = []
    for a in actions:
        if a.kind == "undo" or a.id in undone:
            continue
        if a.kind == "found":
            statuses.setdefault(a.finding_id, FindingStatus(FindingState.NEW))
            continue
        targets = [a.finding_id] if a.finding_id is not None else list(statuses)
        for fid in targets:
            status = statuses.get(fid)
            new = next_state(status.state, a.kind) if status is not None else None
            if new is None:
                continue
            status.state = new
            if a.kind == "reopen":
                status.reopened = str(a.payload.get("reason", "reopened by a review"))
            elif a.kind in _CLEARS_REOPENED:
                status.reopened = ""
            if a.kind == "mark_repaired":
                status.repaired_at = from_text(a.payload["at"])
            elif a.kind in ("dismiss", "keep_model"):
                status.dismissed_values = dict(a.payload.get("values", {}))
        if a.kind in CORRECTION_ACTIONS:
            corrections.append(_correction_from(a))
        elif a.kind == "mark_repaired":
            corrections = _close_corrections(corrections, from_text(a.payload["at"]))
    return statuses, corrections


def _correction_from(a: Action) -> Correction:
    return Correction(
        tag=a.tag, gain=float(a.payload["gain"]), bias=float(a.payload["bias"]),
        valid_from=from_text(a.payload.get("valid_from")), valid_until=None,
        kind=CORRECTION_ACTIONS[a.kind], source_action=a.id,
    )


def _close_corrections(corrections: list[Correction], at: pd.Timestamp) -> list[Correction]:
    """End the open corrections that started before the repair at ``at``."""
    out = []
    for c in corrections:
        if c.is_open() and (c.valid_from is None or c.valid_from < at):
            c = Correction(c.tag, c.gain, c.bias, c.valid_from, at, c.kind, c.source_action)
        out.append(c)
    return out


def changed_materially(before: Mapping, after: Mapping) -> bool:
    """Whether any fitted value moved by more than :data:`MATERIAL_CHANGE` (relative)."""
    for name in FITTED_VALUES:
        a, b = _number(before.get(name)), _number(after.get(name))
        if a is None and b is None:
            continue
        if a is None or b is None:
            return True
        if abs(b - a) > MATERIAL_CHANGE * max(abs(a), 1e-12):
            return True
    return False


def _number(value) -> float | None:
    if value is None:
        return None
    value = float(value)
    return None if math.isnan(value) else value

