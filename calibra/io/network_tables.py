"""Reading ``network/buses.csv`` and ``network/branches.csv`` into bus and branch tables."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from calibra.io.branch_checks import (
    BRANCH_KINDS,
    check_branch_parameters,
    no_impedance_message,
)
from calibra.io.cells import (
    bool_cells,
    choice_cells,
    first_occurrences,
    id_cells,
    number_cells,
    text_cells,
)
from calibra.io.problems import ProblemLog
from calibra.io.text_files import read_small_table
from calibra.model.network import BRANCH_COLUMNS, BUS_COLUMNS, TAP_CHANGER_COLUMNS
from calibra.model.tap_changers import TappedSide

BUSES_FILE = "network/buses.csv"
BRANCHES_FILE = "network/branches.csv"

BUS_REQUIRED = ["bus", "substation", "kv", "zero_injection", "g_shunt_mw", "b_shunt_mvar"]
BUS_OPTIONAL = ["name"]
BRANCH_REQUIRED = ["branch", "from_bus", "to_bus", "r", "x", "b", "tap", "shift_deg", "kind"]
BRANCH_OPTIONAL = ["in_service", "name", *TAP_CHANGER_COLUMNS]
#: A step above this share of the nominal ratio is unusual (REFERENCES.md: 0.625-1.25 % per
#: step, common practice, no source): a warning, in case a ratio was written for a step.
USUAL_MAX_STEP_PCT = 5.0


def read_buses(folder: Path, log: ProblemLog) -> pd.DataFrame | None:
    """The bus table indexed by bus id (columns of ``BUS_COLUMNS``), or None if unreadable.

    The table is returned even when some cells are bad (so later checks can use the ids);
    the caller decides from the log whether it is usable. Empty shunt cells mean zero.
    """
    t = read_small_table(folder / BUSES_FILE, BUSES_FILE, log, BUS_REQUIRED, BUS_OPTIONAL)
    if t is None:
        return None
    ids = id_cells(t, "bus", log, "bus id")
    name = text_cells(t, "name", log, required=False)
    buses = pd.DataFrame(
        {
            "substation": text_cells(t, "substation", log, required=True),
            "kv": number_cells(t, "kv", log, positive=True),
            "zero_injection": bool_cells(t, "zero_injection", log, default=None),
            "g_shunt_mw": number_cells(t, "g_shunt_mw", log, required=False, default=0.0),
            "b_shunt_mvar": number_cells(t, "b_shunt_mvar", log, required=False, default=0.0),
            "name": np.where(name != "", name, ids),
        },
        index=pd.Index(ids, name="bus", dtype=str),
    )
    return buses[first_occurrences(ids)][BUS_COLUMNS]


def read_branches(
    folder: Path, bus_ids: pd.Index | None, log: ProblemLog
) -> pd.DataFrame | None:
    """The branch table indexed by branch id (columns of ``BRANCH_COLUMNS``).

    ``bus_ids`` are the known buses (None when the bus table could not be read: the
    references are then not checked). Empty ``b``/``shift_deg`` cells mean zero, an empty
    ``tap`` means 1, an empty ``in_service`` means true.
    """
    t = read_small_table(
        folder / BRANCHES_FILE, BRANCHES_FILE, log, BRANCH_REQUIRED, BRANCH_OPTIONAL
    )
    if t is None:
        return None
    ids = id_cells(t, "branch", log, "branch id")
    from_bus = text_cells(t, "from_bus", log, required=True)
    to_bus = text_cells(t, "to_bus", log, required=True)
    known = set(bus_ids) if bus_ids is not None else None
    for column, ends in (("from_bus", from_bus), ("to_bus", to_bus)):
        if known is None:
            continue
        for i, bus in enumerate(ends):
            if bus and bus not in known:
                log.error(t.file, int(t.rows[i]), column, f"unknown bus '{bus}'")
    for i in np.flatnonzero((from_bus != "") & (from_bus == to_bus)):
        log.error(
            t.file, int(t.rows[i]), "to_bus",
            f"the branch connects bus '{to_bus[i]}' to itself",
        )
    r = number_cells(t, "r", log)
    x = number_cells(t, "x", log)
    for i in np.flatnonzero((r == 0) & (x == 0)):
        log.error(t.file, int(t.rows[i]), "x", no_impedance_message())
    name = text_cells(t, "name", log, required=False)
    branches = pd.DataFrame(
        {
            "from_bus": from_bus,
            "to_bus": to_bus,
            "r": r,
            "x": x,
            "b": number_cells(t, "b", log, required=False, default=0.0),
            "tap": number_cells(t, "tap", log, required=False, default=1.0, positive=True),
            "shift_deg": number_cells(t, "shift_deg", log, required=False, default=0.0),
            "kind": choice_cells(
                t, "kind", BRANCH_KINDS, log, required=True, what="branch kind"
            ),
            "in_service": bool_cells(t, "in_service", log, default=True),
            "name": np.where(name != "", name, ids),
        },
        index=pd.Index(ids, name="branch", dtype=str),
    )
    check_branch_parameters(t.file, t.rows, {c: branches[c].to_numpy() for c in branches}, log)
    columns = list(BRANCH_COLUMNS)
    if any(t.has(c) for c in TAP_CHANGER_COLUMNS):
        for column, values in _tap_changer_cells(t, branches["kind"].to_numpy(), log).items():
            branches[column] = values
        columns += TAP_CHANGER_COLUMNS
    return branches[first_occurrences(ids)][columns]


def _tap_changer_cells(t, kind: np.ndarray, log: ProblemLog) -> dict[str, np.ndarray]:
    """The optional tap-changer columns: ``tap_step_pct`` (> 0, % of nominal per step),
    ``tap_neutral`` (a whole step number, 0 when empty) and ``tap_side`` (from/to, from when
    empty), given only on transformers; neutral or side without a step size is an error."""
    step = number_cells(t, "tap_step_pct", log, required=False, positive=True)
    neutral = number_cells(t, "tap_neutral", log, required=False, default=np.nan)
    side = choice_cells(t, "tap_side", {s.value: s.value for s in TappedSide}, log,
                        required=False, what="tapped side")
    given = {c: t.cells(c) != "" if t.has(c) else np.zeros(len(t.rows), bool)
             for c in TAP_CHANGER_COLUMNS}
    for i in np.flatnonzero(np.isfinite(neutral) & (neutral != np.round(neutral))):
        log.error(t.file, int(t.rows[i]), "tap_neutral",
                  f"{neutral[i]:g} is not a whole step number")
    for i in np.flatnonzero(np.isfinite(step) & (step > USUAL_MAX_STEP_PCT)):
        log.warning(t.file, int(t.rows[i]), "tap_step_pct",
                    f"{step[i]:g} % per step is unusually large (typical 0.625-1.25 %); the "
                    "column holds the step in % of the nominal ratio")
    any_given = given["tap_step_pct"] | given["tap_neutral"] | given["tap_side"]
    for i in np.flatnonzero(any_given & (kind != "transformer") & (kind != "")):
        column = next(c for c in TAP_CHANGER_COLUMNS if given[c][i])
        log.error(t.file, int(t.rows[i]), column,
                  f"a {kind[i]} has no tap changer; leave the tap-changer columns empty")
    for column in ("tap_neutral", "tap_side"):
        for i in np.flatnonzero(given[column] & ~given["tap_step_pct"] & (kind == "transformer")):
            log.error(t.file, int(t.rows[i]), "tap_step_pct",
                      f"empty, but {column} is given: a tap changer needs its step size (% of "
                      "the nominal ratio per step)")
    has = np.isfinite(step)
    return {"tap_step_pct": step,
            "tap_neutral": np.where(has, np.nan_to_num(neutral, nan=0.0), np.nan),
            "tap_side": np.where(has, np.where(side == "", TappedSide.FROM.value, side), "")}
