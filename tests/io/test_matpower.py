"""The MATPOWER case-file reader, checked against published test systems and pypower.

Sources: the column meanings of the case format (version 2) are those of pypower's
``caseformat`` module and its ``idx_bus``/``idx_gen``/``idx_brch`` column constants (pypower is
the Python port of MATPOWER; Zimmerman, Murillo-Sánchez & Thomas, IEEE Trans. Power Systems
26(1), 2011). The IEEE cases are pypower's case files, which are the MATPOWER cases; they are
written as ``.m`` text by ``write_case`` below in the layout MATPOWER's own case files use
(a header comment row per matrix, tab-separated cells, rows ended by ``;``).
``fixtures/harrowdene.m`` is our own invented network, written by hand.
"""

from pathlib import Path

import numpy as np
import pytest
from pypower import idx_brch, idx_bus, idx_gen
from pypower.api import case14, case30, case39, case57, case118, case300, ppoption, runpf

from calibra.io import read_cdf
from calibra.io.matpower import BRANCH_NAMES, BUS_NAMES, GEN_NAMES, read_matpower
from calibra.model.network import network_from_matpower
from tests.io.test_cdf import FIXTURE as IEEE14_CDF
from tests.io.test_cdf import assert_same_network

FIXTURES = Path(__file__).parent / "fixtures"
HARROWDENE = FIXTURES / "harrowdene.m"

_HEADERS = {
    "bus": "bus_i\ttype\tPd\tQd\tGs\tBs\tarea\tVm\tVa\tbaseKV\tzone\tVmax\tVmin",
    "gen": "bus\tPg\tQg\tQmax\tQmin\tVg\tmBase\tstatus\tPmax\tPmin\tPc1\tPc2\tQc1min\tQc1max"
           "\tQc2min\tQc2max\tramp_agc\tramp_10\tramp_30\tramp_q\tapf",
    "branch": "fbus\ttbus\tr\tx\tb\trateA\trateB\trateC\tratio\tangle\tstatus\tangmin\tangmax",
    "gencost": "2\tstartup\tshutdown\tn\tc(n-1)\t...\tc0",
}


def num(value: float) -> str:
    """Shortest text that reads back as the same float (integers without a point)."""
    value = float(value)
    return str(int(value)) if value.is_integer() and abs(value) < 1e15 else repr(value)


def write_case(ppc: dict, name: str) -> str:
    """A pypower case as MATPOWER case-file text (version 2; test helper)."""
    lines = [f"function mpc = {name}", f"%{name.upper()}  written from pypower's case arrays",
             "", "%% MATPOWER Case Format : Version 2", "mpc.version = '2';", "",
             "%%-----  Power Flow Data  -----%%", "%% system MVA base",
             f"mpc.baseMVA = {num(ppc['baseMVA'])};"]
    for key in ("bus", "gen", "branch", "gencost"):
        if key not in ppc:
            continue
        lines += ["", f"%% {key} data", "%\t" + _HEADERS[key], f"mpc.{key} = ["]
        lines += ["\t" + "\t".join(num(v) for v in row) + ";" for row in ppc[key]]
        lines.append("];")
    return "\n".join(lines) + "\n"


# ----------------------------------------------------------------------------- columns
def test_column_names_are_those_of_the_case_format():
    # pypower's idx_* modules define each column's position under the manual's name.
    for names, module in ((BUS_NAMES, idx_bus), (GEN_NAMES, idx_gen),
                          (BRANCH_NAMES, idx_brch)):
        for position, name in enumerate(names):
            assert getattr(module, name) == position, name


# ----------------------------------------------------------------------------- IEEE cases
CASES = [case14, case30, case39, case57, case118, case300]


def expected_zero_injection(ppc: dict) -> np.ndarray:
    """Straight from the arrays: a PQ or PV bus without load, shunt or generator in service
    (the rule the issue gives: no load, generation or shunt)."""
    bus, gen = ppc["bus"], ppc["gen"]
    generating = set(gen[gen[:, idx_gen.GEN_STATUS] > 0, idx_gen.GEN_BUS].astype(int))
    quiet = (bus[:, [idx_bus.PD, idx_bus.QD, idx_bus.GS, idx_bus.BS]] == 0).all(axis=1)
    return (np.isin(bus[:, idx_bus.BUS_TYPE], [1, 2]) & quiet
            & ~np.isin(bus[:, idx_bus.BUS_I].astype(int), list(generating)))


def assert_matches_arrays(case, ppc: dict) -> None:
    net, bus, branch = case.network, ppc["bus"], ppc["branch"]
    assert case.base_mva == ppc["baseMVA"]
    assert net.buses.index.tolist() == [str(int(b)) for b in bus[:, idx_bus.BUS_I]]
    kv = np.where(bus[:, idx_bus.BASE_KV] > 0, bus[:, idx_bus.BASE_KV], 1.0)
    np.testing.assert_array_equal(net.buses["kv"], kv)
    np.testing.assert_array_equal(net.buses["g_shunt_mw"], bus[:, idx_bus.GS])
    np.testing.assert_array_equal(net.buses["b_shunt_mvar"], bus[:, idx_bus.BS])
    np.testing.assert_array_equal(net.buses["zero_injection"], expected_zero_injection(ppc))
    np.testing.assert_array_equal(case.bus_data["load_mw"], bus[:, idx_bus.PD])
    np.testing.assert_array_equal(case.bus_data["v_pu"], bus[:, idx_bus.VM])
    reference = bus[bus[:, idx_bus.BUS_TYPE] == 3, idx_bus.BUS_I]
    assert net.reference_bus == str(int(reference[0]))
    br = net.branches
    np.testing.assert_array_equal(br["from_bus"], branch[:, idx_brch.F_BUS].astype(int).astype(str))
    np.testing.assert_array_equal(br["to_bus"], branch[:, idx_brch.T_BUS].astype(int).astype(str))
    for column, k in (("r", idx_brch.BR_R), ("x", idx_brch.BR_X), ("b", idx_brch.BR_B),
                      ("shift_deg", idx_brch.SHIFT)):
        np.testing.assert_array_equal(br[column], branch[:, k], err_msg=column)
    tap = branch[:, idx_brch.TAP]
    np.testing.assert_array_equal(br["tap"], np.where(tap == 0, 1.0, tap))
    np.testing.assert_array_equal(br["in_service"], branch[:, idx_brch.BR_STATUS] == 1)
    # The caseformat: ratio 0 for lines; a ratio or a phase angle makes a transformer.
    shifted = (tap != 0) | (branch[:, idx_brch.SHIFT] != 0)
    np.testing.assert_array_equal(br["kind"] == "transformer", shifted)


@pytest.mark.parametrize("make", CASES, ids=lambda f: f.__name__)
def test_ieee_case_reads_back_to_the_same_network(make):
    ppc = make()
    case = read_matpower(write_case(ppc, make.__name__))
    assert_matches_arrays(case, ppc)
    # Circuits numbered in file order between the same two buses: the same ids and
    # admittances as pypower's arrays through network_from_matpower.
    assert_same_network(case.network, network_from_matpower(ppc))
    assert case.network.name == make.__name__
    [note] = [p for p in case.problems if p.column == "gencost"]
    assert note.severity == "warning" and "not read" in note.message


def test_out_of_service_branch_and_generator():
    # case118 with branch 1 out of service and every generator of bus 10 switched off
    # (caseformat: branch status 0 = out of service; gen status <= 0 = out of service).
    ppc = case118()
    ppc["branch"][0, idx_brch.BR_STATUS] = 0
    at_10 = ppc["gen"][:, idx_gen.GEN_BUS] == 10
    ppc["gen"][at_10, idx_gen.GEN_STATUS] = 0
    ppc["bus"][9, [idx_bus.PD, idx_bus.QD]] = 0
    case = read_matpower(write_case(ppc, "case118_altered"))
    assert_matches_arrays(case, ppc)
    assert not case.network.branches["in_service"].iloc[0]
    assert case.network.buses.at["10", "zero_injection"]


def test_ieee14_matches_the_cdf_reader():
    # The archive's CDF file and pypower's case14 (converted from it) describe one network.
    matpower = read_matpower(write_case(case14(), "case14")).network
    cdf = read_cdf(IEEE14_CDF).network
    assert_same_network(matpower, cdf)
    for column in ("kv", "g_shunt_mw", "b_shunt_mvar", "zero_injection"):
        assert matpower.buses[column].tolist() == cdf.buses[column].tolist(), column
    for column in ("from_bus", "to_bus", "r", "x", "b", "tap", "shift_deg", "kind",
                   "in_service"):
        assert matpower.branches[column].tolist() == cdf.branches[column].tolist(), column


# ----------------------------------------------------------------------------- fixture
def test_harrowdene_fixture():
    case = read_matpower(HARROWDENE)
    net = case.network
    assert case.name == "harrowdene" and case.base_mva == 100.0
    assert net.buses.index.tolist() == ["1", "2", "3", "4", "5", "6", "7"]
    # Typed into the fixture: the second 1-2 circuit, the open point 4-5, two transformers.
    assert net.branches.index.tolist() == ["1-2-1", "1-2-2", "1-3-1", "3-2-1", "3-6-1",
                                           "2-4-1", "6-7-1", "7-5-1", "4-5-1"]
    assert net.branches["in_service"].tolist() == [True] * 8 + [False]
    assert net.branches.loc[["2-4-1", "7-5-1"], "tap"].tolist() == [0.985, 1.0]
    assert (net.branches["kind"] == "transformer").sum() == 2
    # Numbers in several notations (2.6e1, 9.0e-3, .0085, 4.7E-02), a row continued with
    # "...", a row ended by a line end only and a comma-separated row.
    assert case.bus_data.at["4", "load_mw"] == 26.0
    assert net.branches.loc["1-3-1", "r"] == 0.009
    assert net.branches.loc["3-6-1", ["r", "x"]].tolist() == [0.0085, 0.047]
    assert net.buses.loc["5", "kv"] == 33.0 and net.buses.loc["7", "b_shunt_mvar"] == -3.0
    # Marrick Fell has no load and only a generator out of service; Sallow Beck 132 has a
    # shunt reactor: only bus 3 is zero-injection.
    assert net.buses.index[net.buses["zero_injection"]].tolist() == ["3"]
    assert net.reference_bus == "1"
    notes = {p.column: p for p in case.problems}
    assert set(notes) == {"gencost", "bus_name"}
    assert notes["gencost"].row == 55 and notes["bus_name"].row == 62


def test_harrowdene_solved_state_is_reproduced_by_pypower():
    # The fixture's VM/VA were solved by pypower's runpf from the data typed in; a power flow
    # on what the reader returned must give them again (rounded to 6 digits in the file).
    case = read_matpower(HARROWDENE)
    net, data, gens = case.network, case.bus_data, case.generators
    bus = np.zeros((net.n_bus, 13))
    bus[:, 0] = net.buses.index.astype(int)
    bus[:, 1] = data["bus_type"]
    bus[:, 2], bus[:, 3] = data["load_mw"], data["load_mvar"]
    bus[:, 4], bus[:, 5] = net.buses["g_shunt_mw"], net.buses["b_shunt_mvar"]
    bus[:, 6], bus[:, 7], bus[:, 9], bus[:, 10], bus[:, 11], bus[:, 12] = 1, 1, 132, 1, 1.1, 0.9
    gen = np.zeros((len(gens), 21))
    gen[:, 0] = gens["bus"].astype(int)
    gen[:, 1], gen[:, 5], gen[:, 7] = gens["p_mw"], gens["v_set_pu"], gens["in_service"]
    gen[:, 3], gen[:, 4], gen[:, 6], gen[:, 8] = 999, -999, 100, 999
    br = net.branches
    branch = np.zeros((net.n_branch, 13))
    branch[:, 0], branch[:, 1] = br["from_bus"].astype(int), br["to_bus"].astype(int)
    branch[:, 2], branch[:, 3], branch[:, 4] = br["r"], br["x"], br["b"]
    branch[:, 8] = np.where(br["kind"] == "transformer", br["tap"], 0)
    branch[:, 9], branch[:, 10], branch[:, 11], branch[:, 12] = br["shift_deg"], \
        br["in_service"], -360, 360
    ppc = {"version": "2", "baseMVA": case.base_mva, "bus": bus, "gen": gen, "branch": branch}
    result, ok = runpf(ppc, ppoption(VERBOSE=0, OUT_ALL=0))
    assert ok
    np.testing.assert_allclose(result["bus"][:, 7], data["v_pu"], atol=1e-6)
    np.testing.assert_allclose(result["bus"][:, 8], data["angle_deg"], atol=1e-6)
    np.testing.assert_allclose(result["gen"][:2, 2], gens["q_mvar"][:2], atol=1e-5)
