"""``model-corrections.csv``: the network model's corrections, read, checked and written.

One row per parameter (columns :data:`MODEL_CORRECTION_COLUMNS`): ``element`` (a branch id,
or a bus id for ``shunt``), ``parameter`` (r, x, b, tap, shift, shunt), ``decision`` (``set``
or ``keep``), ``value`` (the value to use, in the network table's unit: pu, the tap ratio,
degrees, Mvar at 1.0 pu; required for ``set``), ``reason``, ``entered_by``, ``entered_at``
and ``ledger_action`` (the ledger action that wrote the row; empty for a row typed by hand).
The loader applies the ``set`` rows to the network model of every review; the network files
themselves are never rewritten. Every bad cell is an error naming the file, row and column.
This module is the one writer of the file.
"""

from __future__ import annotations

import csv
import math
import os
from pathlib import Path

import pandas as pd

from calibra.io.branch_checks import TRANSFORMER
from calibra.io.problems import ProblemLog
from calibra.io.text_files import read_small_table
from calibra.model.model_corrections import ModelCorrection, ModelDecision
from calibra.model.network import Network
from calibra.model.parameters import (
    TRANSFORMER_KINDS,
    NetworkParameter,
    ParameterKind,
)

MODEL_CORRECTIONS_FILE = "model-corrections.csv"
MODEL_CORRECTION_COLUMNS = ["element", "parameter", "decision", "value", "reason",
                            "entered_by", "entered_at", "ledger_action"]
_REQUIRED = MODEL_CORRECTION_COLUMNS[:3]
_OPTIONAL = MODEL_CORRECTION_COLUMNS[3:]


def _value_problem(kind: ParameterKind, value: float) -> str:
    """Why ``value`` cannot be the parameter's ('' when it can)."""
    if kind == ParameterKind.TAP and value <= 0:
        return f"a tap ratio must be positive, not {value:g}"
    if kind == ParameterKind.R and value < 0:
        return f"a resistance cannot be negative ({value:g})"
    if kind == ParameterKind.X and value == 0:
        return "a reactance of 0 leaves the branch without impedance"
    if kind == ParameterKind.SHIFT and abs(value) > 180:
        return f"a phase shift is within ±180°, not {value:g}"
    return ""


def _row(network: Network, rel: str, row: int, cells: dict[str, str],
         log: ProblemLog) -> ModelCorrection | None:
    """One checked row, or None after logging what is wrong with it."""
    before = len(log.items)
    words = {str(k): k for k in ParameterKind}
    kind = words.get(cells["parameter"].lower())
    if kind is None:
        log.error(rel, row, "parameter", f"'{cells['parameter']}' is not a parameter (use "
                  f"{', '.join(words)})")
    decision = {str(d): d for d in ModelDecision}.get(cells["decision"].lower())
    if decision is None:
        log.error(rel, row, "decision", f"'{cells['decision']}' is not a decision (use "
                  f"{' or '.join(map(str, ModelDecision))})")
    element = cells["element"]
    if not element:
        log.error(rel, row, "element", "empty; a branch id (or a bus id for shunt) is needed")
    elif kind is not None:
        table = network.buses if kind == ParameterKind.SHUNT else network.branches
        if element not in table.index:
            what = "bus" if kind == ParameterKind.SHUNT else "branch"
            log.error(rel, row, "element", f"{what} '{element}' is not in the network")
        elif (kind in TRANSFORMER_KINDS
              and str(network.branches.at[element, "kind"]) != TRANSFORMER):
            log.error(rel, row, "parameter", f"{kind} applies to a transformer; branch "
                      f"'{element}' is a {network.branches.at[element, 'kind']}")
    value = None
    text = cells.get("value", "")
    if text:
        number = pd.to_numeric(text.replace(",", ".") if text.count(",") == 1
                               and "." not in text else text, errors="coerce")
        if pd.isna(number) or not math.isfinite(float(number)):
            log.error(rel, row, "value", f"'{text}' is not a finite number")
        else:
            value = float(number)
            why = _value_problem(kind, value) if kind is not None else ""
            if why:
                log.error(rel, row, "value", why)
    elif decision == ModelDecision.SET:
        log.error(rel, row, "value", "empty; 'set' needs the value to use")
    action = None
    if cells.get("ledger_action", ""):
        try:
            action = int(cells["ledger_action"])
        except ValueError:
            log.error(rel, row, "ledger_action", f"'{cells['ledger_action']}' is not an "
                      "action number (leave it empty for a row typed by hand)")
    if len(log.items) > before:
        return None
    return ModelCorrection(NetworkParameter(element, kind), decision,
                           value if decision == ModelDecision.SET else None,
                           cells.get("reason", ""), cells.get("entered_by", ""),
                           cells.get("entered_at", ""), action, row)


def read_model_corrections(folder: Path, network: Network,
                           log: ProblemLog) -> list[ModelCorrection]:
    """The checked rows of the site folder's model-correction file ([] when there is none, or
    only its header). A parameter named on two rows is an error at the second."""
    path = Path(folder) / MODEL_CORRECTIONS_FILE
    if _existing(path) == []:
        return []  # no file, or a header only (every correction taken out): nothing to apply
    t = read_small_table(path, MODEL_CORRECTIONS_FILE, log, _REQUIRED, _OPTIONAL)
    if t is None:
        return []
    out: list[ModelCorrection] = []
    first: dict[NetworkParameter, int] = {}
    for i, row in enumerate(t.rows):
        cells = {c: str(t.cells(c)[i]) for c in MODEL_CORRECTION_COLUMNS}
        found = _row(network, MODEL_CORRECTIONS_FILE, int(row), cells, log)
        if found is None:
            continue
        if found.parameter in first:
            log.error(MODEL_CORRECTIONS_FILE, int(row), "parameter",
                      f"the {found.parameter.label()} is already corrected on row "
                      f"{first[found.parameter]}; keep one row per parameter")
            continue
        first[found.parameter] = int(row)
        out.append(found)
    return out


def _cells(c: ModelCorrection) -> list[str]:
    return [c.parameter.element, str(c.parameter.kind), str(c.decision),
            "" if c.value is None else repr(float(c.value)), c.reason, c.entered_by,
            c.entered_at, "" if c.ledger_action is None else str(c.ledger_action)]


def _write(path: Path, rows: list[list[str]]) -> None:
    tmp = path.with_name(path.name + ".tmp")
    with tmp.open("w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle)
        writer.writerow(MODEL_CORRECTION_COLUMNS)
        writer.writerows(rows)
    os.replace(tmp, path)


def _existing(path: Path) -> list[list[str]] | None:
    """The file's rows in :data:`MODEL_CORRECTION_COLUMNS` order ([] when there is no file;
    None when it cannot be read as UTF-8 CSV: the loader then says why)."""
    if not path.is_file():
        return []
    try:
        with path.open(newline="", encoding="utf-8-sig") as handle:
            records = list(csv.reader(handle))
    except (OSError, UnicodeDecodeError, csv.Error):
        return None
    if not records:
        return []
    header = [h.strip().lower() for h in records[0]]
    return [[(r[header.index(c)] if c in header and header.index(c) < len(r) else "")
             for c in MODEL_CORRECTION_COLUMNS] for r in records[1:] if any(x.strip() for x in r)]


def _readable(path: Path) -> list[list[str]]:
    rows = _existing(path)
    if rows is None:
        raise ValueError(f"{path}: cannot be read as a UTF-8 CSV table; repair it before "
                         "calibra writes to it")
    return rows


def add_model_correction(folder: Path, correction: ModelCorrection) -> Path:
    """Append ``correction`` to the folder's file (created with its header when missing).
    Raises ValueError when the file already holds a row for the same parameter."""
    path = Path(folder) / MODEL_CORRECTIONS_FILE
    rows = _readable(path)
    p = correction.parameter
    for n, r in enumerate(rows, start=2):
        if r[0] == p.element and r[1].lower() == str(p.kind):
            raise ValueError(f"{MODEL_CORRECTIONS_FILE}, row {n}: the {p.label()} is already "
                             "corrected there; change or remove that row first")
    _write(path, [*rows, _cells(correction)])
    return path


def remove_ledger_action(folder: Path, action_id: int) -> bool:
    """Take out the row the ledger action ``action_id`` wrote (an undo); False when none."""
    path = Path(folder) / MODEL_CORRECTIONS_FILE
    rows = _readable(path)
    kept = [r for r in rows if r[-1].strip() != str(int(action_id))]
    if len(kept) == len(rows):
        return False
    _write(path, kept)
    return True
