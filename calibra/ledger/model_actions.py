"""The network model's owner's actions on a ``model`` finding, recorded in the ledger.

``set_model`` takes the parameter at a value (the estimate, or one the owner gives) and
``keep_model`` records that the model's value is right as it is; each appends one action to
the ledger and writes one row of the site's ``model-corrections.csv`` (through
:mod:`calibra.io.model_corrections_file`, its one writer) in the same transaction, so a failed
write leaves neither. The next review reads the file: with ``set`` the meters are judged on the
corrected model, with ``keep`` the parameter is not offered again and the meters around it are
the suspects. :func:`undo_last` undoes an action and takes its file row out again.
"""

from __future__ import annotations

import math
from pathlib import Path

import pandas as pd

from calibra.diagnosis.findings import MODEL_KINDS
from calibra.io.model_corrections_file import add_model_correction, remove_ledger_action
from calibra.ledger import _rows
from calibra.ledger._time import to_text
from calibra.ledger.ledger import Ledger, default_user
from calibra.ledger.schema import LedgerError
from calibra.ledger.states import MODEL_ACTIONS
from calibra.model.model_corrections import ModelCorrection, ModelDecision
from calibra.model.parameters import NetworkParameter


def _model_row(ledger: Ledger, finding_id: str) -> pd.Series:
    found = ledger.findings()
    if finding_id not in found.index:
        raise LedgerError(f"no finding {finding_id!r} in {ledger.path}")
    row = found.loc[finding_id]
    if row["finding"] not in MODEL_KINDS:
        raise LedgerError(f"{finding_id}: a {row['finding']} finding is about a meter; only "
                          "a model finding is corrected in the network model")
    return row


def _record(ledger: Ledger, folder: Path, finding_id: str, kind: str,
            correction: ModelCorrection, payload: dict, user: str | None) -> int:
    # Ledger internals on purpose: the action and its file row are one transaction.
    with ledger._transaction() as conn:
        tag = ledger._check_findingaction(conn, finding_id, kind)
        action_id = ledger._act(conn, kind, tag, user, finding_id, payload)
        add_model_correction(folder, ModelCorrection(
            correction.parameter, correction.decision, correction.value, correction.reason,
            user or default_user(), to_text(ledger._clock(), "action time"), action_id))
    return action_id


def set_model(ledger: Ledger, site_folder: str | Path, finding_id: str,
              value: float | None = None, user: str | None = None, note: str = "") -> int:
    """Correct the model: the finding's parameter taken at ``value`` (default: the estimate)
    in every later review; the finding becomes ``corrected`` until the network model is
    updated at its source (then mark it repaired). Returns the action id."""
    row = _model_row(ledger, finding_id)
    value = float(row["estimated_value"]) if value is None else float(value)
    if not math.isfinite(value):
        raise ValueError(f"{finding_id}: the value must be a finite number, not {value}")
    p = NetworkParameter(str(row["element"]), str(row["parameter"]))
    reason = note.strip() or (f"review estimate {float(row['estimated_value']):.6g} ± "
                              f"{float(row['estimated_std']):.2g}")
    payload = _rows.with_note({"element": p.element, "parameter": str(p.kind), "value": value,
                               "model_value": float(row["model_value"])}, note)
    return _record(ledger, Path(site_folder), finding_id, "set_model",
                   ModelCorrection(p, ModelDecision.SET, value, reason), payload, user)


def keep_model(ledger: Ledger, site_folder: str | Path, finding_id: str, reason: str,
               user: str | None = None) -> int:
    """The model's value is right as it is (``reason``: how it was checked): the finding is
    closed (``dismissed``), and later reviews no longer offer the parameter, so the meters it
    explained are judged as faulty again. Returns the action id."""
    if not str(reason).strip():
        raise ValueError("keeping the model's value needs a reason (how it was checked)")
    row = _model_row(ledger, finding_id)
    p = NetworkParameter(str(row["element"]), str(row["parameter"]))
    payload = {"reason": str(reason).strip(), "element": p.element,
               "parameter": str(p.kind), "values": {}}
    return _record(ledger, Path(site_folder), finding_id, "keep_model",
                   ModelCorrection(p, ModelDecision.KEEP, None, str(reason).strip()),
                   payload, user)


def undo_last(ledger: Ledger, site_folder: str | Path, item: str,
              user: str | None = None) -> int:
    """Undo the last action on ``item`` (:meth:`Ledger.undo`); an undone model action's row
    of model-corrections.csv is taken out again. Returns the undo's id."""
    undo_id = ledger.undo(item, user)
    undone = ledger.history().loc[undo_id]
    target = int(undone["undoes"])
    if ledger.history().loc[target, "action"] in MODEL_ACTIONS:
        remove_ledger_action(Path(site_folder), target)
    return undo_id
