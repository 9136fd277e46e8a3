"""Reading networks in the IEEE Common Data Format (CDF).

Source: IEEE Working Group, "Common Data Format for the Exchange of Solved Load Flow Data",
IEEE Trans. PAS-92(6), 1973. Copies of the column layout disagree by one column in places, so
a bus card is read as number (columns 1–4) and name (5–17) by position, and the rest is split
on whitespace; branch cards are split on whitespace. Sections end with a line of ``-9…``.

Bus ids are the bus numbers as text; branch ids are ``"<tap bus>-<Z bus>-<circuit>"``.
A final turns ratio of 0 means 1 (a line); a negative one is an error. Negative X (series
capacitors), phase shifts and taps load; :mod:`calibra.io.branch_checks` says which values
earn a warning. Shunt G and B are per unit on the system base.
A bus is zero-injection when it is a load bus (type 0 or 1) with no load, no generation and
no shunt — the same rule :func:`calibra.model.network.network_from_matpower` applies.
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
from calibra.io.problems import ProblemLog
from calibra.io.text_files import source_text
from calibra.model.network import BRANCH_COLUMNS, BUS_COLUMNS, Network
from calibra.model.site import LoadProblem, SiteLoadError

BUS_FIELDS = [
    "area", "zone", "type", "final voltage", "final angle", "load MW", "load Mvar", "gen MW",
    "gen Mvar", "base kV", "desired volts", "max Mvar", "min Mvar", "shunt G", "shunt B",
]
BRANCH_FIELDS = [
    "tap bus", "Z bus", "area", "zone", "circuit", "type", "R", "X", "B", "rating 1",
    "rating 2", "rating 3", "control bus", "side", "final turns ratio", "final angle",
]
_CDF_COLUMNS = BranchColumns(x="X", b="B", tap="final turns ratio", kind="type")
_END = re.compile(r"^\s*-9+\s*$")
_ITEMS = re.compile(r"(\d+)\s+ITEMS", re.IGNORECASE)


class CdfFormatError(SiteLoadError):
    """A CDF file that cannot be read; carries every problem found."""


@dataclass
class CdfCase:
    """A network read from a CDF file with the solved state and bus powers it publishes.

    ``solved_state``: per bus ``v_pu`` and ``angle_deg``. ``bus_data``: per bus ``name``,
    ``bus_type`` (0/1 load, 2 generator, 3 slack), ``load_mw``, ``load_mvar``, ``gen_mw``,
    ``gen_mvar``, ``desired_v_pu``, ``q_max_mvar``, ``q_min_mvar``, ``base_kv``.
    """

    title: str
    base_mva: float
    network: Network
    solved_state: pd.DataFrame
    bus_data: pd.DataFrame
    problems: list[LoadProblem] = field(default_factory=list)


def read_cdf(source: str | Path, *, frequency_hz: float = 60.0) -> CdfCase:
    """Read a CDF file (a path, or the file's text when it contains a line break).

    Raises :class:`CdfFormatError` listing every problem when the file cannot be used;
    warnings are kept in ``CdfCase.problems``.
    """
    log = ProblemLog()
    text, label = source_text(source, log)
    case = parse_cdf(text, label, log, frequency_hz=frequency_hz) if text is not None else None
    if case is None or log.has_errors:
        raise CdfFormatError(log.items)
    return case


def _number(token: str, integer: bool = False) -> float | int:
    value = float(token)
    if not np.isfinite(value) or (integer and value != int(value)):
        raise ValueError(token)
    return int(value) if integer else value


def _card_numbers(
    tokens: list[str], fields: list[str], integers: tuple[str, ...], file: str, row: int,
    log: ProblemLog,
) -> dict | None:
    """The named numbers of a card; None (errors logged) when any is not a number."""
    values = {}
    for name, token in zip(fields, tokens, strict=False):
        try:
            values[name] = _number(token, name in integers)
        except ValueError:
            log.error(file, row, name, f"'{token}' is not a number")
    return values if len(values) == len(fields) else None


def _sections(lines: list[str]) -> dict[str, tuple[int, list[tuple[int, str]], int | None]]:
    """Section name -> (header row, [(row, card)], declared item count)."""
    found: dict[str, tuple[int, list[tuple[int, str]], int | None]] = {}
    current: list[tuple[int, str]] | None = None
    for row, line in enumerate(lines, start=1):
        upper = line.strip().upper()
        if current is None:
            if "FOLLOWS" in upper:
                name = upper.split("FOLLOWS")[0].strip()
                items = _ITEMS.search(upper)
                current = []
                found[name] = (row, current, int(items.group(1)) if items else None)
            continue
        if _END.match(line):
            current = None
        elif line.strip():
            current.append((row, line.rstrip("\r\n")))
    return found


def _parse_title(line: str) -> tuple[float | None, str]:
    after_date = line[9:] + " "
    base = re.search(r"\s(\d+\.\d*)\s", after_date) or re.search(r"\s(\d+)\s", after_date)
    title = re.search(r"\s\d{4}\s+[A-Za-z]?\s+(\S.*)$", line)
    return (float(base.group(1)) if base else None), (title.group(1).strip() if title else "")


_LINE_END = re.compile(r"\r\n|\r|\n")


def parse_cdf(
    text: str, file: str, log: ProblemLog, *, frequency_hz: float = 60.0
) -> CdfCase | None:
    """Parse CDF text; problems are logged against ``file`` with line numbers as rows.

    Returns None when no network can be built.
    """
    # Line ends as text editors count them (\r\n, \n, a lone \r), so rows match what the user
    # sees; other Unicode separators (\x85, \u2028) are not line ends in a card file.
    lines = _LINE_END.split(text)
    if lines and lines[-1] == "":
        lines.pop()
    first = next((ln for ln in lines if ln.strip()), "")
    base, title = _parse_title(first)
    if base is None or base <= 0:
        log.error(file, 1, "MVA base", "no system MVA base found in the title card")
    sections = _sections(lines)
    if "BUS DATA" not in sections:
        log.error(file, None, None, "no 'BUS DATA FOLLOWS' section")
    if "BRANCH DATA" not in sections:
        log.error(file, None, None, "no 'BRANCH DATA FOLLOWS' section")
    if log.has_errors:
        return None
    bus_data = _read_bus_cards(sections["BUS DATA"], file, log)
    branches = _read_branch_cards(sections["BRANCH DATA"], bus_data.index, file, log)
    if log.has_errors or bus_data.empty:
        if bus_data.empty:
            log.error(file, None, None, "the bus section has no cards")
        return None
    return _build_case(title, base, bus_data, branches, file, log, frequency_hz)


def _read_bus_cards(section, file: str, log: ProblemLog) -> pd.DataFrame:
    header_row, cards, declared = section
    records = []
    seen: dict[str, int] = {}
    for row, line in cards:
        try:
            number = _number(line[:4], integer=True)
        except ValueError:
            log.error(
                file, row, "bus number", f"'{line[:4].strip()}' in columns 1-4 is not a bus number"
            )
            continue
        rest = line[17:].split()
        if len(rest) < len(BUS_FIELDS):
            log.error(
                file, row, None,
                f"bus card has {len(rest)} fields after the name, {len(BUS_FIELDS)} are needed",
            )
            continue
        values = _card_numbers(rest, BUS_FIELDS, ("area", "zone", "type"), file, row, log)
        if values is None:
            continue
        if values["type"] not in (0, 1, 2, 3):
            log.error(file, row, "type", f"bus type {values['type']} is not 0, 1, 2 or 3")
        bus = str(number)
        if bus in seen:
            log.error(
                file, row, "bus number", f"bus {bus} appears twice (first at row {seen[bus]})"
            )
            continue
        seen[bus] = row
        records.append((bus, " ".join(line[4:17].split()) or bus, values))
    if declared is not None and declared != len(cards):
        log.warning(
            file, header_row, None, f"the section declares {declared} buses but has {len(cards)}"
        )
    return pd.DataFrame(
        {
            "name": [r[1] for r in records],
            "bus_type": [int(r[2]["type"]) for r in records],
            "v_pu": [r[2]["final voltage"] for r in records],
            "angle_deg": [r[2]["final angle"] for r in records],
            "load_mw": [r[2]["load MW"] for r in records],
            "load_mvar": [r[2]["load Mvar"] for r in records],
            "gen_mw": [r[2]["gen MW"] for r in records],
            "gen_mvar": [r[2]["gen Mvar"] for r in records],
            "desired_v_pu": [r[2]["desired volts"] for r in records],
            "q_max_mvar": [r[2]["max Mvar"] for r in records],
            "q_min_mvar": [r[2]["min Mvar"] for r in records],
            "base_kv": [r[2]["base kV"] for r in records],
            "g_pu": [r[2]["shunt G"] for r in records],
            "b_pu": [r[2]["shunt B"] for r in records],
            "row": [seen[r[0]] for r in records],
        },
        index=pd.Index([r[0] for r in records], name="bus", dtype=str),
    )


def _read_branch_cards(section, bus_ids: pd.Index, file: str, log: ProblemLog) -> pd.DataFrame:
    header_row, cards, declared = section
    records: dict[str, dict] = {}
    for row, line in cards:
        tokens = line.split()
        if len(tokens) < len(BRANCH_FIELDS):
            log.error(
                file, row, None,
                f"branch card has {len(tokens)} fields, {len(BRANCH_FIELDS)} are needed",
            )
            continue
        values = _card_numbers(
            tokens, BRANCH_FIELDS, ("tap bus", "Z bus", "circuit", "type"), file, row, log
        )
        if values is None:
            continue
        f, t = str(values["tap bus"]), str(values["Z bus"])
        bad = False
        for column, bus in (("tap bus", f), ("Z bus", t)):
            if bus not in bus_ids:
                log.error(file, row, column, f"unknown bus {bus}")
                bad = True
        if f == t:
            log.error(file, row, "Z bus", f"the branch connects bus {f} to itself")
            bad = True
        if values["R"] == 0 and values["X"] == 0:
            log.error(file, row, "X", no_impedance_message("R", "X"))
            bad = True
        if values["final turns ratio"] < 0:
            log.error(file, row, "final turns ratio",
                      f"{values['final turns ratio']:g} is negative; a turns ratio is positive "
                      "(0 means 1, a line)")
            bad = True
        if bad:
            continue
        circuit = values["circuit"]
        branch_id = f"{f}-{t}-{circuit}"
        if branch_id in records:
            first = records[branch_id]["row"]
            circuit = 1
            while f"{f}-{t}-{circuit}" in records:
                circuit += 1
            log.warning(
                file, row, "circuit",
                f"circuit {values['circuit']} from {f} to {t} already used at row {first}; "
                f"this branch is called {f}-{t}-{circuit}",
            )
            branch_id = f"{f}-{t}-{circuit}"
        ratio, angle = values["final turns ratio"], values["final angle"]
        records[branch_id] = {
            "from_bus": f,
            "to_bus": t,
            "r": values["R"],
            "x": values["X"],
            "b": values["B"],
            "tap": 1.0 if ratio == 0 else ratio,
            "shift_deg": angle,
            "kind": TRANSFORMER if ratio != 0 or angle != 0 else LINE,
            "in_service": True,
            "name": branch_id,
            "row": row,
        }
    if declared is not None and declared != len(cards):
        log.warning(
            file, header_row, None,
            f"the section declares {declared} branches but has {len(cards)}",
        )
    table = pd.DataFrame.from_dict(records, orient="index", columns=BRANCH_COLUMNS)
    table.index = pd.Index(list(records), name="branch", dtype=str)
    rows = np.array([r["row"] for r in records.values()], dtype=int)
    check_branch_parameters(file, rows, {c: table[c].to_numpy() for c in table}, log,
                            _CDF_COLUMNS)
    return table


def _build_case(
    title: str,
    base: float,
    data: pd.DataFrame,
    branches: pd.DataFrame,
    file: str,
    log: ProblemLog,
    frequency_hz: float,
) -> CdfCase:
    no_kv = data["base_kv"] <= 0
    if no_kv.any():
        log.warning(
            file, int(data["row"][no_kv].iloc[0]), "base kV",
            f"{int(no_kv.sum())} buses have no base kV; their nominal kV is set to 1, "
            "so voltages in kV read as per unit",
            count=int(no_kv.sum()),
        )
    zero = (
        data["bus_type"].isin([0, 1])
        & data[["load_mw", "load_mvar", "gen_mw", "gen_mvar", "g_pu", "b_pu"]].eq(0).all(axis=1)
    )
    buses = pd.DataFrame(
        {
            "substation": data.index,
            "kv": data["base_kv"].where(~no_kv, 1.0),
            "zero_injection": zero,
            "g_shunt_mw": data["g_pu"] * base,
            "b_shunt_mvar": data["b_pu"] * base,
            "name": data["name"],
        },
        index=data.index,
    )[BUS_COLUMNS]
    slack = data.index[data["bus_type"] == 3]
    if len(slack) == 0:
        reference = data.index[0]
        log.warning(
            file, None, "type", f"no slack bus (type 3); bus {reference} is taken as reference"
        )
    else:
        reference = slack[0]
        if len(slack) > 1:
            log.warning(
                file, int(data.at[slack[1], "row"]), "type",
                f"{len(slack)} slack buses; bus {reference} is taken as reference",
            )
    network = Network(title or file, base, buses, branches, reference, frequency_hz)
    return CdfCase(
        title=title,
        base_mva=base,
        network=network,
        solved_state=data[["v_pu", "angle_deg"]].copy(),
        bus_data=data.drop(columns=["v_pu", "angle_deg", "g_pu", "b_pu", "row"]),
        problems=list(log.items),
    )
