"""Reading networks from MATPOWER case files (``*.m``, case format version 2).

Source of the column meanings: the MATPOWER manual's case format (R. D. Zimmerman,
C. E. Murillo-Sánchez, R. J. Thomas, "MATPOWER: Steady-State Operations, Planning, and Analysis
Tools for Power Systems Research and Education", IEEE Trans. Power Systems 26(1), 2011), as
written down from memory here and checked against pypower's ``caseformat`` and ``idx_*``
modules in the tests.

The ids are those of the IEEE Common Data Format reader (:mod:`calibra.io.cdf`): bus ids the
bus numbers as text, branch ids ``"<from>-<to>-<circuit>"`` with circuits numbered in file
order between the same two buses. TAP 0 means 1 (a line); a branch with a tap or a phase
shift is a transformer. GS and BS are MW and Mvar at 1 pu. A bus is zero-injection when it is
a PQ or PV bus (type 1 or 2) with no load (PD, QD), no shunt (GS, BS) and no generator in
service — the rule :func:`calibra.model.network.network_from_matpower` applies.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from calibra.io.branch_checks import (
    LINE,
    TRANSFORMER,
    BranchColumns,
    check_branch_parameters,
    no_impedance_message,
)
from calibra.io.matpower_text import Assignment, CaseText, parse_case_text
from calibra.io.problems import ProblemLog
from calibra.io.text_files import source_text
from calibra.model.network import BRANCH_COLUMNS, BUS_COLUMNS, Network
from calibra.model.site import LoadProblem, SiteLoadError

MATPOWER_SUFFIXES = (".m",)

# Column names of the case format, version 2 (from memory of the MATPOWER manual, appendix B;
# the names after the input columns are the result columns a solved case may carry).
BUS_NAMES = ["BUS_I", "BUS_TYPE", "PD", "QD", "GS", "BS", "BUS_AREA", "VM", "VA", "BASE_KV",
             "ZONE", "VMAX", "VMIN", "LAM_P", "LAM_Q", "MU_VMAX", "MU_VMIN"]
GEN_NAMES = ["GEN_BUS", "PG", "QG", "QMAX", "QMIN", "VG", "MBASE", "GEN_STATUS", "PMAX", "PMIN",
             "PC1", "PC2", "QC1MIN", "QC1MAX", "QC2MIN", "QC2MAX", "RAMP_AGC", "RAMP_10",
             "RAMP_30", "RAMP_Q", "APF", "MU_PMAX", "MU_PMIN", "MU_QMAX", "MU_QMIN"]
BRANCH_NAMES = ["F_BUS", "T_BUS", "BR_R", "BR_X", "BR_B", "RATE_A", "RATE_B", "RATE_C", "TAP",
                "SHIFT", "BR_STATUS", "ANGMIN", "ANGMAX", "PF", "QF", "PT", "QT", "MU_SF",
                "MU_ST", "MU_ANGMIN", "MU_ANGMAX"]
#: The fewest columns read: bus up to VMIN, gen the ten of version 1 (version 2 files have 21),
#: branch up to BR_STATUS (ANGMIN and ANGMAX are optional here).
MIN_COLUMNS = {"bus": 13, "gen": 10, "branch": 11}
_NAMES = {"bus": BUS_NAMES, "gen": GEN_NAMES, "branch": BRANCH_NAMES}
#: Columns that must hold finite numbers (the others may hold Inf, as QMAX often does).
_USED = {"bus": BUS_NAMES[:10], "gen": ["GEN_BUS", "PG", "QG", "VG", "GEN_STATUS"],
         "branch": BRANCH_NAMES[:11]}
_INTEGERS = {"BUS_I", "BUS_TYPE", "GEN_BUS", "F_BUS", "T_BUS"}
_KNOWN_FIELDS = {
    "gencost": "generator costs", "bus_name": "bus names", "areas": "areas (version 1)",
    "gentype": "generator types", "genfuel": "generator fuels", "dcline": "DC lines",
}
# MATLAB's number syntax (from memory): digits with an optional point and exponent (e, E, d
# or D), an optional sign; Inf and NaN.
_NUMBER = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eEdD][+-]?\d+)?|[+-]?(?:Inf|inf|NaN|nan)")
_MATPOWER_COLUMNS = BranchColumns(x="BR_X", b="BR_B", tap="TAP", kind="TAP")


class MatpowerFormatError(SiteLoadError):
    """A case file that cannot be read; carries every problem found."""


@dataclass
class MatpowerCase:
    """A network read from a case file, with the bus and generator data it gives.

    ``bus_data``: per bus ``bus_type`` (1 PQ, 2 PV, 3 reference, 4 isolated), ``load_mw``,
    ``load_mvar``, ``v_pu``, ``angle_deg``, ``base_kv``. ``generators``: one row per gen row,
    ``bus``, ``p_mw``, ``q_mvar``, ``v_set_pu``, ``in_service``.
    """

    name: str
    base_mva: float
    network: Network
    bus_data: pd.DataFrame
    generators: pd.DataFrame
    problems: list[LoadProblem] = field(default_factory=list)


def read_matpower(source: str | Path, *, frequency_hz: float = 60.0) -> MatpowerCase:
    """Read a case file (a path, or the file's text when it contains a line break).

    Raises :class:`MatpowerFormatError` listing every problem when the file cannot be used;
    warnings are kept in ``MatpowerCase.problems``.
    """
    log = ProblemLog()
    text, label = source_text(source, log)
    case = parse_matpower(text, label, log, frequency_hz=frequency_hz) if text else None
    if text == "":
        log.error(label, None, None, "the file is empty")
    if case is None or log.has_errors:
        raise MatpowerFormatError(log.items)
    return case


def parse_matpower(
    text: str, file: str, log: ProblemLog, *, frequency_hz: float = 60.0
) -> MatpowerCase | None:
    """Parse case-file text; problems are logged against ``file`` with line numbers as rows.

    Returns None when no network can be built.
    """
    parsed = parse_case_text(text, file, log)
    fields = _case_fields(parsed, file, log)
    if fields is None:
        return None
    base, matrices = fields
    tables = {}
    for name in ("bus", "gen", "branch"):
        tables[name] = _numbers(matrices[name], name, file, log)
    if log.has_errors:
        return None
    data = _bus_data(tables["bus"], file, log)
    gens = _generators(tables["gen"], data, file, log)
    branches = _branches(tables["branch"], data.index, file, log)
    if data.empty:
        log.error(file, matrices["bus"].line, "BUS_I", "mpc.bus has no rows; the network has "
                  "no bus")
    if log.has_errors:
        return None
    name = parsed.function_name or Path(file).stem
    return _build_case(name, base, data, gens, branches, file, log, frequency_hz)


def _case_fields(parsed: CaseText, file: str, log: ProblemLog):
    """(baseMVA, {"bus"/"gen"/"branch": matrix}) of the case, or None (errors logged)."""
    if len(parsed.outputs) > 1:
        log.error(file, parsed.header_line, None,
                  "a function returning " + ", ".join(parsed.outputs) + " is a version 1 "
                  "case file; only version 2 (one struct, mpc.version = '2') is read")
        return None
    var = parsed.outputs[0] if parsed.outputs else "mpc"
    found: dict[str, Assignment] = {}
    for item in parsed.assignments:
        if not item.target.startswith(var + "."):
            if item.target in ("bus", "gen", "branch", "baseMVA"):
                log.error(file, item.line, None,
                          f"'{item.target} = …' is the version 1 case format; only version 2 "
                          f"({var}.{item.target} = …) is read")
            else:
                log.warning(file, item.line, None,
                            f"the assignment to '{item.target}' is not part of the case; "
                            "not read")
            continue
        key = item.target[len(var) + 1:]
        if key in found:
            log.warning(file, item.line, key, f"{var}.{key} is assigned again (first at line "
                        f"{found[key].line}); this later value is used, as MATLAB would")
        found[key] = item
    for key, item in found.items():
        if key not in ("version", "baseMVA", "bus", "gen", "branch"):
            what = _KNOWN_FIELDS.get(key, "a field calibra does not use")
            log.warning(file, item.line, key, f"{var}.{key} ({what}) is not needed to review "
                        "telemetry; not read")
    version = found.get("version")
    if version is None:
        log.error(file, None, "version", f"no {var}.version line: a version 2 case file says "
                  f"{var}.version = '2'; version 1 files are not read")
    elif version.value.strip() != "2":
        log.error(file, version.line, "version",
                  f"case format version '{version.value}'; only version 2 is read")
    base = None
    item = found.get("baseMVA")
    if item is None:
        log.error(file, None, "baseMVA", f"no {var}.baseMVA line (the system MVA base)")
    else:
        base = _scalar(item.value) if item.kind == "word" else None
        if base is None or not 0 < base < np.inf:
            log.error(file, item.line, "baseMVA",
                      f"'{item.value}' is not a system MVA base (a number greater than zero)")
            base = None
    for key in ("bus", "gen", "branch"):
        item = found.get(key)
        if item is None:
            log.error(file, None, key, f"no {var}.{key} matrix")
        elif item.kind != "matrix":
            log.error(file, item.line, key,
                      f"{var}.{key} is not a matrix of numbers in brackets [ … ]")
    if log.has_errors:
        return None
    return base, {key: found[key] for key in ("bus", "gen", "branch")}


def _scalar(text: str) -> float | None:
    if not _NUMBER.fullmatch(text):
        return None
    return float(text.replace("d", "e").replace("D", "e"))


def _numbers(item: Assignment, table: str, file: str, log: ProblemLog) -> list:
    """[(line, values by column name)] of a matrix; rows with problems are logged and left
    out (the case is then unusable)."""
    names, need = _NAMES[table], MIN_COLUMNS[table]
    width = len(item.rows[0]) if item.rows else need
    rows = []
    for cells in item.rows:
        line = cells[0][0]
        if len(cells) != width or len(cells) < need:
            expected = (f"the first row has {width}" if len(cells) != width
                        else f"at least {need} are needed ({names[0]} … {names[need - 1]})")
            first = min(len(cells), width)  # the first column missing, or the first extra
            column = names[first] if first < len(names) else f"column {first + 1}"
            log.error(file, line, column, f"this row of mpc.{table} has {len(cells)} columns; "
                      f"{expected}")
            continue
        values: dict[str, float] = {}
        for k, (cell_line, cell) in enumerate(cells):
            column = names[k] if k < len(names) else f"column {k + 1}"
            value = _scalar(cell)
            if value is None:
                log.error(file, cell_line, column, f"'{cell}' is not a number")
            elif column in _USED[table] and not np.isfinite(value):
                log.error(file, cell_line, column, f"'{cell}' is not a finite number")
            elif column in _INTEGERS and value != int(value):
                log.error(file, cell_line, column, f"'{cell}' is not a whole number")
            else:
                values[column] = value
        rows.append((line, values))
    return rows


def _bus_data(rows: list, file: str, log: ProblemLog) -> pd.DataFrame:
    records, lines = [], {}
    for line, v in rows:
        number = int(v["BUS_I"])
        bus = str(number)
        if number <= 0:
            log.error(file, line, "BUS_I", f"bus number {bus} is not a positive whole number")
            continue
        if v["BUS_TYPE"] not in (1, 2, 3, 4):
            log.error(file, line, "BUS_TYPE",
                      f"bus type {v['BUS_TYPE']:g} is not 1 (PQ), 2 (PV), 3 (reference) or "
                      "4 (isolated)")
            continue
        if bus in lines:
            log.error(file, line, "BUS_I", f"bus {bus} appears twice (first at line "
                      f"{lines[bus]})")
            continue
        lines[bus] = line
        records.append((bus, v))
    return pd.DataFrame(
        {
            "bus_type": [int(v["BUS_TYPE"]) for _, v in records],
            "load_mw": [v["PD"] for _, v in records],
            "load_mvar": [v["QD"] for _, v in records],
            "g_shunt_mw": [v["GS"] for _, v in records],
            "b_shunt_mvar": [v["BS"] for _, v in records],
            "v_pu": [v["VM"] for _, v in records],
            "angle_deg": [v["VA"] for _, v in records],
            "base_kv": [v["BASE_KV"] for _, v in records],
            "line": [lines[b] for b, _ in records],
        },
        index=pd.Index([b for b, _ in records], name="bus", dtype=str),
    )


def _generators(rows: list, data: pd.DataFrame, file: str, log: ProblemLog) -> pd.DataFrame:
    kept = []
    for line, v in rows:
        bus = str(int(v["GEN_BUS"]))
        if bus not in data.index:
            log.error(file, line, "GEN_BUS", f"unknown bus {bus}")
            continue
        kept.append((bus, v["PG"], v["QG"], v["VG"], v["GEN_STATUS"] > 0, line))
    return pd.DataFrame(kept, columns=["bus", "p_mw", "q_mvar", "v_set_pu", "in_service",
                                       "line"])


def _branches(rows: list, bus_ids: pd.Index, file: str, log: ProblemLog) -> pd.DataFrame:
    records: dict[str, dict] = {}
    circuits: dict[tuple[str, str], int] = {}
    for line, v in rows:
        f, t = str(int(v["F_BUS"])), str(int(v["T_BUS"]))
        bad = False
        for column, bus in (("F_BUS", f), ("T_BUS", t)):
            if bus not in bus_ids:
                log.error(file, line, column, f"unknown bus {bus}")
                bad = True
        if f == t:
            log.error(file, line, "T_BUS", f"the branch connects bus {f} to itself")
            bad = True
        if v["BR_R"] == 0 and v["BR_X"] == 0:
            log.error(file, line, "BR_X", no_impedance_message("BR_R", "BR_X"))
            bad = True
        if v["TAP"] < 0:
            log.error(file, line, "TAP", f"{v['TAP']:g} is negative; a turns ratio is "
                      "positive (0 means 1, a line)")
            bad = True
        if v["BR_STATUS"] not in (0, 1):
            log.error(file, line, "BR_STATUS", f"status {v['BR_STATUS']:g} is not 1 (in "
                      "service) or 0 (out of service)")
            bad = True
        if bad:
            continue
        circuits[(f, t)] = circuits.get((f, t), 0) + 1
        branch_id = f"{f}-{t}-{circuits[(f, t)]}"
        tap, shift = v["TAP"], v["SHIFT"]
        records[branch_id] = {
            "from_bus": f, "to_bus": t, "r": v["BR_R"], "x": v["BR_X"], "b": v["BR_B"],
            "tap": 1.0 if tap == 0 else tap, "shift_deg": shift,
            "kind": TRANSFORMER if tap != 0 or shift != 0 else LINE,
            "in_service": bool(v["BR_STATUS"] == 1), "name": branch_id, "line": line,
        }
    table = pd.DataFrame.from_dict(records, orient="index", columns=BRANCH_COLUMNS)
    table.index = pd.Index(list(records), name="branch", dtype=str)
    table["in_service"] = table["in_service"].astype(bool)
    lines = np.array([r["line"] for r in records.values()], dtype=int)
    check_branch_parameters(file, lines, {c: table[c].to_numpy() for c in table}, log,
                            _MATPOWER_COLUMNS)
    return table


def _build_case(name: str, base: float, data: pd.DataFrame, gens: pd.DataFrame,
                branches: pd.DataFrame, file: str, log: ProblemLog,
                frequency_hz: float) -> MatpowerCase:
    no_kv = data["base_kv"] <= 0
    if no_kv.any():
        log.warning(
            file, int(data["line"][no_kv].iloc[0]), "BASE_KV",
            f"{int(no_kv.sum())} buses have no base kV; their nominal kV is set to 1, "
            "so voltages in kV read as per unit",
            count=int(no_kv.sum()),
        )
    generating = set(gens["bus"][gens["in_service"]])
    zero = (
        data["bus_type"].isin([1, 2])
        & data[["load_mw", "load_mvar", "g_shunt_mw", "b_shunt_mvar"]].eq(0).all(axis=1)
        & ~data.index.isin(list(generating))
    )
    buses = pd.DataFrame(
        {
            "substation": data.index,
            "kv": data["base_kv"].where(~no_kv, 1.0),
            "zero_injection": zero,
            "g_shunt_mw": data["g_shunt_mw"],
            "b_shunt_mvar": data["b_shunt_mvar"],
            "name": data.index,
        },
        index=data.index,
    )[BUS_COLUMNS]
    slack = data.index[data["bus_type"] == 3]
    if len(slack) == 0:
        reference = data.index[0]
        log.warning(file, None, "BUS_TYPE",
                    f"no reference bus (type 3); bus {reference} is taken as reference")
    else:
        reference = slack[0]
        if len(slack) > 1:
            log.warning(file, int(data.at[slack[1], "line"]), "BUS_TYPE",
                        f"{len(slack)} reference buses (type 3); bus {reference} is taken "
                        "as reference")
    network = Network(name, base, buses, branches, reference, frequency_hz)
    return MatpowerCase(
        name=name, base_mva=base, network=network,
        bus_data=data.drop(columns=["g_shunt_mw", "b_shunt_mvar", "line"]),
        generators=gens.drop(columns="line"), problems=list(log.items),
    )
