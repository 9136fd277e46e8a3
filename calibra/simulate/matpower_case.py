"""Writing a network with its base operating point as a MATPOWER case file (version 2).

The columns are those of the MATPOWER case format (R. D. Zimmerman, C. E. Murillo-Sánchez,
R. J. Thomas, IEEE Trans. Power Systems 26(1), 2011; the names as in
:mod:`calibra.io.matpower`, from memory). Buses are numbered 1, 2, … in the network's order;
branches get the ids calibra's reader gives them (``<F_BUS>-<T_BUS>-<circuit>``, circuits
counted in file order). A bus's load, generation and shunt come from the :class:`GridCase`, so
that the reader's zero-injection rule (no load, no shunt, no generator in service) gives the
network's own zero-injection buses; :func:`matpower_case_text` checks that it does.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from calibra.io.matpower import BRANCH_NAMES, BUS_NAMES, GEN_NAMES, parse_matpower
from calibra.io.problems import ProblemLog
from calibra.model.network import Network
from calibra.simulate.case import GridCase

TRANSFORMER = "transformer"


@dataclass(frozen=True)
class CaseIds:
    """Bus id → the case file's bus number, branch id → the id the reader gives it."""

    buses: dict[str, int]
    branches: dict[str, str]


def _number(value: float) -> str:
    value = float(value)
    return str(int(value)) if value.is_integer() else repr(value)


def _matrix(name: str, columns: list[str], rows: list[list[float]]) -> list[str]:
    lines = [f"%% {name} data", "%\t" + "\t".join(columns), f"mpc.{name} = ["]
    lines += ["\t" + "\t".join(_number(v) for v in row) + ";" for row in rows]
    return lines + ["];", ""]


def matpower_case_text(network: Network, case: GridCase, function: str,
                       title: str) -> tuple[str, CaseIds]:
    """The case file's text and the ids it gives. Raises ValueError when the file read back
    would not give the network's zero-injection buses (load or generation missing)."""
    buses = network.buses
    number = {bus: k + 1 for k, bus in enumerate(buses.index)}
    generating = set(case.generator_buses)
    bus_rows = []
    for bus, row in buses.iterrows():
        kind = 3 if bus == network.reference_bus else 2 if case.pv[bus] else 1
        bus_rows.append([number[bus], kind, round(case.load_mw[bus], 4),
                         round(case.load_mvar[bus], 4), row["g_shunt_mw"], row["b_shunt_mvar"],
                         1, 1.0, 0.0, row["kv"], 1, 1.1, 0.9])
    gen_rows = []
    for bus in buses.index:
        if bus in generating:
            p = float(case.gen_mw[bus])
            gen_rows.append([number[bus], p, float(case.gen_mvar[bus]), 9999, -9999,
                             float(case.v_set[bus]), network.base_mva, 1, max(p, 1.0) * 1.2, 0,
                             *([0] * 11)])
    branch_rows, ids, circuits = [], {}, {}
    for branch, row in network.branches.iterrows():
        f, t = number[row["from_bus"]], number[row["to_bus"]]
        circuits[(f, t)] = circuits.get((f, t), 0) + 1
        ids[branch] = f"{f}-{t}-{circuits[(f, t)]}"
        transformer = row["kind"] == TRANSFORMER
        tap = float(row["tap"]) if transformer else 0.0
        branch_rows.append([f, t, row["r"], row["x"], row["b"], 0, 0, 0, tap,
                            row["shift_deg"], 1 if row["in_service"] else 0, -360, 360])
    lines = [f"function mpc = {function}", f"%{function.upper()}  {title}", "%",
             "%   MATPOWER case format, version 2.", "", "mpc.version = '2';", "",
             "%% system MVA base", f"mpc.baseMVA = {_number(network.base_mva)};", ""]
    lines += _matrix("bus", BUS_NAMES[:13], bus_rows)
    lines += _matrix("gen", GEN_NAMES[:21], gen_rows)
    lines += _matrix("branch", BRANCH_NAMES[:13], branch_rows)
    text = "\n".join(lines)
    _check(text, network, number)
    return text, CaseIds(number, ids)


def _check(text: str, network: Network, number: dict[str, int]) -> None:
    log = ProblemLog()
    read = parse_matpower(text, "case", log, frequency_hz=network.frequency_hz)
    if read is None:
        raise ValueError("the case file does not read back: " + "; ".join(map(str, log.items)))
    flags = read.network.buses["zero_injection"].to_numpy(bool)
    wanted = network.buses["zero_injection"].to_numpy(bool)
    if not np.array_equal(flags, wanted):
        wrong = [b for b, a, w in zip(network.buses.index, flags, wanted, strict=True) if a != w]
        raise ValueError(f"zero-injection buses differ when read back: {wrong} "
                         f"(bus numbers {[number[b] for b in wrong]})")
