"""The IEEE Common Data Format reader, checked against published test systems.

``fixtures/ieee14.cdf`` is the IEEE 14-bus test case as distributed by the UW Power Systems
Test Case Archive (``ieee14cdf.txt``), copied card for card; its values are the same as
pypower's ``case14``, which was converted from that file. The larger cases (57, 118, 300
buses) are written from pypower's data in the CDF card layout by ``write_cdf`` below, so the
reader is exercised on more than one file.
"""

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from pypower.api import case14, case57, case118, case300, ppoption, runpf

from calibra.io import CdfFormatError, load_site, read_cdf
from calibra.model.network import network_from_matpower
from tests.io.site_builder import SITE_TOML, Table, find, problems_of

FIXTURE = Path(__file__).parent / "fixtures" / "ieee14.cdf"

# Published solved state of the IEEE 14-bus case, from the archive file
# (/work/shared/REFERENCES.md, "V published [R]" and "θ° published [R]").
PUBLISHED_V = [1.060, 1.045, 1.010, 1.019, 1.020, 1.070, 1.062, 1.090, 1.056, 1.051, 1.057,
               1.055, 1.050, 1.036]
PUBLISHED_ANGLE = [0, -4.98, -12.72, -10.33, -8.78, -14.22, -13.37, -13.36, -14.94, -15.10,
                   -14.79, -15.07, -15.16, -16.04]
# Re-solved state (REFERENCES.md "V re-solved [C]"), four decimals.
RESOLVED_V = [1.0600, 1.0450, 1.0100, 1.0177, 1.0195, 1.0700, 1.0615, 1.0900, 1.0559, 1.0510,
              1.0569, 1.0552, 1.0504, 1.0355]


def assert_same_network(ours, reference) -> None:
    assert list(ours.buses.index) == list(reference.buses.index)
    assert list(ours.branches.index) == list(reference.branches.index)
    assert ours.reference_bus == reference.reference_bus
    assert ours.base_mva == reference.base_mva
    assert ours.buses["zero_injection"].tolist() == reference.buses["zero_injection"].tolist()
    assert ours.branches["kind"].tolist() == reference.branches["kind"].tolist()
    y_ours, yf_ours, yt_ours = (m.toarray() for m in ours.admittance_matrices())
    y_ref, yf_ref, yt_ref = (m.toarray() for m in reference.admittance_matrices())
    assert np.abs(y_ours - y_ref).max() <= 1e-12
    assert np.abs(yf_ours - yf_ref).max() <= 1e-12
    assert np.abs(yt_ours - yt_ref).max() <= 1e-12


def test_ieee14_network_matches_pypower_case14():
    case = read_cdf(FIXTURE)
    assert case.title == "IEEE 14 Bus Test Case" and case.base_mva == 100.0
    assert_same_network(case.network, network_from_matpower(case14()))
    # REFERENCES.md: bus 7 is the only zero-injection bus; bus 9 has B = 0.19 pu;
    # the transformers are 4-7, 4-9 and 5-6 with ratios 0.978, 0.969, 0.932.
    net = case.network
    assert net.buses.index[net.buses["zero_injection"]].tolist() == ["7"]
    assert net.buses.at["9", "b_shunt_mvar"] == pytest.approx(19.0)
    transformers = net.branches[net.branches["kind"] == "transformer"]
    assert transformers["tap"].to_dict() == {"4-7-1": 0.978, "4-9-1": 0.969, "5-6-1": 0.932}
    assert net.buses.at["7", "name"] == "Bus 7 ZV"


def test_ieee14_published_state():
    state = read_cdf(FIXTURE).solved_state
    np.testing.assert_array_equal(state["v_pu"].to_numpy(), PUBLISHED_V)
    np.testing.assert_array_equal(state["angle_deg"].to_numpy(), PUBLISHED_ANGLE)


def ppc_from_case(case) -> dict:
    """A pypower case built only from what the CDF reader returned."""
    data, net = case.bus_data, case.network
    buses = net.buses
    type_map = {0: 1, 1: 1, 2: 2, 3: 3}
    bus = np.zeros((len(buses), 13))
    bus[:, 0] = buses.index.astype(int)
    bus[:, 1] = data["bus_type"].map(type_map)
    bus[:, 2], bus[:, 3] = data["load_mw"], data["load_mvar"]
    bus[:, 4], bus[:, 5] = buses["g_shunt_mw"], buses["b_shunt_mvar"]
    bus[:, 6], bus[:, 7], bus[:, 10], bus[:, 11], bus[:, 12] = 1, 1.0, 1, 1.1, 0.9
    gens = data[data["bus_type"].isin([2, 3])]
    gen = np.zeros((len(gens), 21))
    gen[:, 0] = gens.index.astype(int)
    gen[:, 1], gen[:, 2] = gens["gen_mw"], gens["gen_mvar"]
    gen[:, 3], gen[:, 4] = 9999, -9999
    gen[:, 5], gen[:, 6], gen[:, 7], gen[:, 8] = gens["desired_v_pu"], case.base_mva, 1, 9999
    br = net.branches
    branch = np.zeros((len(br), 13))
    branch[:, 0], branch[:, 1] = br["from_bus"].astype(int), br["to_bus"].astype(int)
    branch[:, 2], branch[:, 3], branch[:, 4] = br["r"], br["x"], br["b"]
    branch[:, 8] = np.where(br["kind"] == "transformer", br["tap"], 0.0)
    branch[:, 9], branch[:, 10], branch[:, 11], branch[:, 12] = br["shift_deg"], 1, -360, 360
    return {"version": "2", "baseMVA": case.base_mva, "bus": bus, "gen": gen, "branch": branch}


def test_ieee14_loads_and_generation_solve_to_the_published_state():
    # A power flow (pypower, test-only reference) on the loads, generation and voltage
    # set points read from the file must give the re-solved state of REFERENCES.md [C]
    # and stay within the rounding of the published one [R].
    case = read_cdf(FIXTURE)
    result, ok = runpf(ppc_from_case(case), ppoption(VERBOSE=0, OUT_ALL=0))
    assert ok
    np.testing.assert_allclose(result["bus"][:, 7], RESOLVED_V, atol=5e-5)
    np.testing.assert_allclose(result["bus"][:, 7], PUBLISHED_V, atol=2e-3)
    np.testing.assert_allclose(result["bus"][:, 8], PUBLISHED_ANGLE, atol=0.02)
    # REFERENCES.md [C]: P(1→2) = 156.88 MW, slack 232.39 MW
    assert result["branch"][0, 13] == pytest.approx(156.88, abs=0.01)
    assert result["gen"][0, 1] == pytest.approx(232.39, abs=0.01)


def num(value) -> str:
    """Shortest text that reads back as the same float."""
    return repr(float(value))


def write_cdf(ppc: dict, title: str) -> str:
    """A pypower case in the CDF card layout (test helper; columns as in REFERENCES.md)."""
    base = ppc["baseMVA"]
    lines = [f" 01/01/00 TEST WRITER        {base:6.1f}  2000 S {title}"]
    bus, gen, branch = ppc["bus"], ppc["gen"], ppc["branch"]
    lines.append(f"BUS DATA FOLLOWS                            {len(bus)} ITEMS")
    cdf_type = {1: 0, 2: 2, 3: 3}
    for row in bus:
        number = int(row[0])
        on = gen[(gen[:, 0] == number) & (gen[:, 7] > 0)]
        vset = on[0, 5] if len(on) else 0.0
        rest = [
            int(row[6]), int(row[10]), cdf_type[int(row[1])], num(row[7]), num(row[8]),
            num(row[2]), num(row[3]), num(on[:, 1].sum()), num(on[:, 2].sum()), num(row[9]),
            num(vset), 0.0, 0.0, num(row[4] / base), num(row[5] / base), 0,
        ]
        lines.append(f"{number:4d} {'Bus ' + str(number):<12s} " + " ".join(map(str, rest)))
    lines.append("-999")
    lines.append(f"BRANCH DATA FOLLOWS                         {len(branch)} ITEMS")
    circuits: dict[tuple[int, int], int] = {}
    for row in branch:
        f, t = int(row[0]), int(row[1])
        circuits[(f, t)] = circuits.get((f, t), 0) + 1
        fields = [f, t, 1, 1, circuits[(f, t)], 0, num(row[2]), num(row[3]), num(row[4]),
                  0, 0, 0, 0, 0, num(row[8]), num(row[9]), 0.0, 0.0, 0.0, 0.0, 0.0]
        lines.append(f"{f:4d} {t:4d} " + " ".join(map(str, fields[2:])))
    lines += ["-999", "LOSS ZONES FOLLOWS                     0 ITEMS", "-99",
              "INTERCHANGE DATA FOLLOWS                 0 ITEMS", "-9",
              "TIE LINES FOLLOWS                     0 ITEMS", "-999", "END OF DATA", ""]
    return "\n".join(lines)


@pytest.mark.parametrize("make", [case57, case118, case300], ids=["57", "118", "300"])
def test_larger_ieee_cases_match_pypower(make):
    ppc = make()
    case = read_cdf(write_cdf(ppc, "IEEE test"))
    assert_same_network(case.network, network_from_matpower(ppc))
    np.testing.assert_array_equal(case.solved_state["v_pu"].to_numpy(), ppc["bus"][:, 7])
    np.testing.assert_array_equal(case.bus_data["load_mw"].to_numpy(), ppc["bus"][:, 2])


# ----------------------------------------------------------------------------- problems
def fixture_lines() -> list[str]:
    return FIXTURE.read_text().splitlines()


def cdf_problems(lines: list[str]):
    with pytest.raises(CdfFormatError) as info:
        read_cdf("\n".join(lines) + "\n")
    return info.value.problems


def test_text_in_a_bus_card():
    lines = fixture_lines()
    lines[4] = lines[4].replace("   94.2 ", "   9x.2 ")  # bus 3, load MW
    p = find(cdf_problems(lines), "<text>", 5, "load MW")
    assert p.message == "'9x.2' is not a number"


def test_unknown_bus_in_a_branch_card():
    lines = fixture_lines()
    lines[18] = "  99" + lines[18][4:]  # first branch card, tap bus
    p = find(cdf_problems(lines), "<text>", 19, "tap bus")
    assert p.message == "unknown bus 99"


def test_branch_without_impedance():
    lines = fixture_lines()
    lines[24] = lines[24].replace("0.01335   0.04211", "0.0       0.0    ")  # branch 4-5
    p = find(cdf_problems(lines), "<text>", 25, "X")
    assert "R and X are both zero" in p.message


def test_short_card_and_missing_section():
    lines = fixture_lines()
    lines[3] = lines[3][:40]
    assert "fields after the name" in find(cdf_problems(lines), "<text>", 4, None).message
    without_branches = [ln for ln in fixture_lines() if not ln.startswith("BRANCH DATA")]
    assert any("BRANCH DATA" in p.message for p in cdf_problems(without_branches))


def test_repeated_circuit_is_renumbered_with_a_warning():
    lines = fixture_lines()
    lines.insert(19, lines[18])  # a second 1-2 circuit 1
    case = read_cdf("\n".join(lines))
    assert "1-2-2" in case.network.branches.index
    p = find(case.problems, "<text>", 20, "circuit", "warning")
    assert "called 1-2-2" in p.message


# ----------------------------------------------------------------------------- in a site
def cdf_site(files, root: Path) -> Path:
    files.toml = SITE_TOML.replace('reference_bus = "FNH132"\n', "")
    files.buses = files.branches = None
    files.extra["network/ieee14.cdf"] = FIXTURE.read_text()
    files.points = Table(
        "tag,quantity,element,end,unit,full_scale,accuracy_pct,substation,device\n"
        "P12,p_flow,1-2-1,from,MW,300,0.5,1,D12\n"
        "V9,v_magnitude,9,,kV,2,0.5,9,D9\n"
    )
    files.snapshots = {"week.csv": "timestamp,P12,V9\n2024-03-04 10:00,156.9,1.056\n"}
    return files.write(root)


def test_site_with_a_cdf_network(files, tmp_path):
    site = load_site(cdf_site(files, tmp_path))
    assert site.network.n_bus == 14 and site.network.reference_bus == "1"
    assert site.network.name == "Fenwick Hollow district"
    warning = find(site.problems, "network/ieee14.cdf", 3, "base kV", "warning")
    assert warning.count == 14
    assert site.snapshots["P12"].iloc[0] == 156.9


def test_cdf_site_base_must_agree(files, tmp_path):
    cdf_site(files, tmp_path)
    (tmp_path / "site.toml").write_text(
        SITE_TOML.replace("100.0", "50.0").replace('reference_bus = "FNH132"\n', "")
    )
    p = find(problems_of(tmp_path), "site.toml", None, "base_mva")
    assert "differs from the 100 MVA base" in p.message


def test_cdf_and_tables_together_are_an_error(files, tmp_path):
    cdf_site(files, tmp_path)
    (tmp_path / "network/buses.csv").write_text("bus\n1\n")
    p = find(problems_of(tmp_path), "network", None, None)
    assert "keep one description of the network" in p.message


def test_bus_data_table_columns():
    data = read_cdf(FIXTURE).bus_data
    assert list(data.columns) == [
        "name", "bus_type", "load_mw", "load_mvar", "gen_mw", "gen_mvar", "desired_v_pu",
        "q_max_mvar", "q_min_mvar", "base_kv",
    ]
    # Archive file, bus 2: load 21.7 MW / 12.7 Mvar, generation 40.0 MW / 42.4 Mvar
    assert data.loc["2", ["load_mw", "load_mvar", "gen_mw", "gen_mvar"]].tolist() == [
        21.7, 12.7, 40.0, 42.4
    ]
    assert isinstance(data, pd.DataFrame)
