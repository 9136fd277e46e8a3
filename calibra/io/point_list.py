"""Reading the point list (``points.csv`` or a spreadsheet): what each telemetered point
measures, where, and how well."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from calibra.io.cells import (
    choice_cells,
    first_occurrences,
    id_cells,
    number_cells,
    text_cells,
)
from calibra.io.point_reporting import reporting_cells
from calibra.io.point_source import POINT_LIST_FILES, POINTS_FILE, read_point_table
from calibra.io.points_config import PointsConfig
from calibra.io.problems import ProblemLog
from calibra.io.text_files import RawTable
from calibra.model.points import (
    ENDS,
    POINT_COLUMNS,
    QUANTITIES,
    REPORTING_COLUMNS,
    SETTING_QUANTITIES,
    TAP_QUANTITY,
    UNIT_SPELLINGS,
    canonical_ratio,
)

__all__ = ["POINT_LIST_FILES", "POINTS_FILE", "read_points"]


def read_points(
    folder: Path,
    buses: pd.DataFrame | None,
    branches: pd.DataFrame | None,
    log: ProblemLog,
    config: PointsConfig | None = None,
) -> tuple[pd.DataFrame | None, pd.Series]:
    """The point list indexed by tag (columns of ``POINT_COLUMNS``; None if unreadable) and
    the spreadsheet row of each tag (its ``attrs``: ``file`` and ``tag_column`` as problems
    name them, e.g. ``points.xlsx [Sheet1]`` and ``Point name (A)``).

    ``config`` is the ``[points]`` table of ``site.toml`` (sheet, header mapping); the file is
    ``points.csv`` or one spreadsheet (see :mod:`calibra.io.point_source`). Problems name the
    column by the file's header where it is not calibra's name, with a spreadsheet's letter.

    ``buses`` and ``branches`` are for checking elements and substations (None when a table
    could not be read: its references are then not checked).
    Empty optional cells are "" (text) or NaN (``sigma``, ``deadband``, ``resolution``: the
    last two in the point's unit, a percentage of full scale converted); ``end`` is "" for
    quantities without an end. A ``branch_status`` or ``tap_position`` point may leave
    ``device`` empty (stored as "") and leave ``full_scale``/``accuracy_pct`` empty or give 0
    (stored as NaN: not applicable); a ``tap_position`` point's element must be a transformer
    with a tap changer (a ``tap_step_pct`` in the branch table).
    """
    since = len(log.items)
    t = read_point_table(folder, config or PointsConfig(), log)
    if t is None:
        return None, pd.Series(dtype=int)
    points, rows = _points(t, buses, branches, log)
    log.relabel(since, t.file, t.labels)
    rows.attrs.update(file=t.file, tag_column=t.labels.get("tag", "tag"), labels=dict(t.labels))
    return points, rows


def _points(
    t: RawTable, buses: pd.DataFrame | None, branches: pd.DataFrame | None, log: ProblemLog
) -> tuple[pd.DataFrame, pd.Series]:
    """The checked point list of a table and the row of each kept tag."""
    tags = id_cells(t, "tag", log, "tag")
    quantity = choice_cells(
        t, "quantity", {q: q for q in QUANTITIES}, log, required=True, what="quantity"
    )
    status = np.isin(quantity, SETTING_QUANTITIES)
    columns = {
        "quantity": quantity,
        "element": text_cells(t, "element", log, required=True),
        "end": choice_cells(t, "end", {e: e for e in ENDS}, log, required=False,
                            what="branch end"),
        "unit": choice_cells(t, "unit", UNIT_SPELLINGS, log, required=True, what="unit"),
        "full_scale": _scale_cells(t, "full_scale", quantity, log),
        "accuracy_pct": _scale_cells(t, "accuracy_pct", quantity, log),
    }
    columns.update({
        "substation": text_cells(t, "substation", log, required=True),
        "device": _device_cells(t, status, log),
        "rtu": text_cells(t, "rtu", log, required=False),
        "channel": text_cells(t, "channel", log, required=False),
        "ct_ratio": _ratio_cells(t, "ct_ratio", log),
        "vt_ratio": _ratio_cells(t, "vt_ratio", log),
        "sigma": number_cells(t, "sigma", log, required=False, positive=True),
        "note": text_cells(t, "note", log, required=False),
    })
    columns.update({c: reporting_cells(t, c, quantity, columns["unit"], columns["full_scale"],
                                       log) for c in REPORTING_COLUMNS})
    _check_meaning(t, columns, log)
    _check_elements(t, columns, buses, branches, log)
    keep = first_occurrences(tags)
    points = pd.DataFrame({c: columns[c][keep] for c in POINT_COLUMNS},
                          index=pd.Index(tags[keep], name="tag", dtype=str))
    return points, pd.Series(t.rows[keep], index=points.index)


def _scale_cells(t: RawTable, column: str, quantity: np.ndarray, log: ProblemLog) -> np.ndarray:
    """``full_scale`` or ``accuracy_pct``: a positive number for analog points; for
    ``branch_status`` and ``tap_position`` points empty or 0 (NaN: a status or a step number
    has no scale) or positive.
    Rows whose quantity is unreadable get the analog rule's sign check only."""
    values = number_cells(t, column, log, required=False)
    if not t.has(column):
        return values
    cells = t.cells(column)
    status = np.isin(quantity, SETTING_QUANTITIES)
    analog = ~status & (quantity != "")
    for i in np.flatnonzero(analog & (cells == "")):
        log.error(t.file, int(t.rows[i]), column,
                  f"empty; a positive number is required for {quantity[i]}")
    for i in np.flatnonzero(~status & (values <= 0)):
        log.error(t.file, int(t.rows[i]), column, f"must be greater than zero, not {cells[i]}")
    for i in np.flatnonzero(status & (values < 0)):
        log.error(t.file, int(t.rows[i]), column,
                  f"must not be negative, not {cells[i]} (a {quantity[i]} point may leave "
                  "it empty or give 0)")
    return np.where(status & (values == 0), np.nan, values)


def _device_cells(t: RawTable, status: np.ndarray, log: ProblemLog) -> np.ndarray:
    """The device of each point: required except for ``branch_status`` and ``tap_position``
    points (a breaker's status contact or a tap-position indicator belongs to no transducer)."""
    cells = text_cells(t, "device", log, required=False)
    if t.has("device"):
        for i in np.flatnonzero(~status & (cells == "")):
            log.error(t.file, int(t.rows[i]), "device",
                      f"empty; a value is required (only {' and '.join(SETTING_QUANTITIES)} "
                      "points may leave it empty)")
    return cells


def _ratio_cells(t: RawTable, column: str, log: ProblemLog) -> np.ndarray:
    """Instrument-transformer ratios written ``1200:5``, ``1200/5``, ``1200-5`` or with spaces,
    kept in calibra's form ``1200:5`` once checked ("" where the cell is empty or bad)."""
    cells = text_cells(t, column, log, required=False)
    written = {text: canonical_ratio(text) for text in set(cells)}
    out = np.array([written[text] or "" for text in cells], dtype=object)
    for i in np.flatnonzero(np.array([written[text] is None for text in cells], dtype=bool)):
        log.error(
            t.file, int(t.rows[i]), column,
            f"'{cells[i]}' is not a ratio of two positive numbers such as 1200:5",
        )
    return out


Columns = dict[str, np.ndarray]


def _check_tap_changer(file: str, row: int, branch: str, branches: pd.DataFrame,
                       log: ProblemLog) -> None:
    """A tap-position point needs a transformer whose tap changer the branch table describes."""
    kind = str(branches.at[branch, "kind"]) if "kind" in branches else ""
    step = branches.at[branch, "tap_step_pct"] if "tap_step_pct" in branches else np.nan
    if kind != "transformer":
        log.error(file, row, "element",
                  f"'{branch}' is a {kind or 'branch'}, but {TAP_QUANTITY} needs a transformer")
    elif not pd.notna(step):
        log.error(file, row, "element",
                  f"transformer '{branch}' has no tap changer in network/branches.csv: give its "
                  "tap_step_pct (and tap_neutral, tap_side) there")


def _check_meaning(t: RawTable, points: Columns, log: ProblemLog) -> None:
    """Branch end and unit against what the quantity allows."""
    raw_ends = t.cells("end")
    for i, (q, unit) in enumerate(zip(points["quantity"], points["unit"], strict=True)):
        if q == "":
            continue
        spec = QUANTITIES[q]
        row = int(t.rows[i])
        raw_end = raw_ends[i]
        if spec["end"] and raw_end == "":
            log.error(t.file, row, "end", f"empty; {q} needs the branch end: from or to")
        elif not spec["end"] and raw_end != "":
            log.error(
                t.file, row, "end", f"'{raw_end}' given, but {q} has no branch end; leave it empty"
            )
        if unit and unit not in spec["units"]:
            allowed = " or ".join(spec["units"])
            log.error(t.file, row, "unit", f"unit '{unit}' is not allowed for {q} (use {allowed})")


def _check_elements(
    t: RawTable,
    points: Columns,
    buses: pd.DataFrame | None,
    branches: pd.DataFrame | None,
    log: ProblemLog,
) -> None:
    """Each element must be a known bus or branch of the kind the quantity needs; the point's
    substation should be that of the measured bus or branch end (a warning otherwise). A
    network that names no substations (every bus its own, named by its id, as a CDF or
    MATPOWER file gives them) is not compared with the point list's substations: one warning
    says so when the point list names others."""
    bus_sub = dict(zip(buses.index, buses["substation"], strict=True)) if buses is not None \
        else None
    compare = bus_sub is not None
    if compare and all(sub == bus for bus, sub in bus_sub.items()):
        named = sorted({s for s in points["substation"] if s and s not in bus_sub})
        if named:
            log.warning(t.file, None, "substation",
                        f"the network names no substations (each bus is its own, named by its "
                        f"id); the point list's {len(named)} substations ('{named[0]}'…) are "
                        "not checked against the buses", count=len(named))
        compare = False
    ends = (dict(zip(branches.index, zip(branches["from_bus"], branches["to_bus"],
                                         strict=True), strict=True))
            if branches is not None else None)
    ids = {"bus": bus_sub, "branch": ends}
    for i, (q, element, end, sub) in enumerate(
        zip(points["quantity"], points["element"], points["end"], points["substation"],
            strict=True)
    ):
        if q == "" or element == "":
            continue
        row = int(t.rows[i])
        kind = QUANTITIES[q]["element"]
        known = ids[kind]
        other = ids["bus" if kind == "branch" else "branch"]
        if known is None:
            continue
        if element not in known:
            if other is not None and element in other:
                other_kind = "bus" if kind == "branch" else "branch"
                log.error(
                    t.file, row, "element", f"'{element}' is a {other_kind}, but {q} needs a {kind}"
                )
            else:
                log.error(t.file, row, "element", f"unknown {kind} '{element}'")
            continue
        if q == TAP_QUANTITY and branches is not None:
            _check_tap_changer(t.file, row, element, branches, log)
        if not compare or sub == "":
            continue
        if kind == "bus":
            at = [element]
        elif end in ENDS:
            at = [known[element][ENDS.index(end)]]
        else:
            at = list(known[element])
        subs = [bus_sub.get(b, "") for b in at]
        if sub not in subs:
            where = " or ".join(f"'{s}' (bus '{b}')" for s, b in zip(subs, at, strict=True))
            log.warning(
                t.file, row, "substation",
                f"point is in substation '{sub}', but its {kind} end is in {where}",
            )
