"""What real network models have loads without error, with warnings only where an engineer
would look twice: series capacitors, bus couplers, phase shifters, off-nominal taps, parallel
circuits, large shunts, low-voltage generator terminals, three-winding star points.

Admittances are checked against pypower's ``makeYbus`` (test-only reference library: the
MATPOWER branch model, tap on the from side, shift in degrees). "Published models" below are
the networks of pandapower's ``networks`` module listed in /work/shared/REFERENCES.md
(PEGASE 89/1354/2869, the GB reduced network, the Icelandic grid), read in their converted
MATPOWER data.
"""

import numpy as np
import pytest
from pypower.makeYbus import makeYbus

from calibra.io import CdfFormatError, load_site, read_cdf
from calibra.model.network import Network
from tests.io.site_builder import find, problems_of, real_model_files, row_of
from tests.io.test_cdf import write_cdf

BRANCHES = "network/branches.csv"
CDF = "<text>"

# Points on the new elements: a status point on the bus coupler with no device, full scale
# or accuracy class (as control-system point lists leave them), a flow through the series
# capacitor, a generator terminal injection and a 0.4 kV voltage.
NEW_POINTS = [
    ["TLR.CPL.CB", "branch_status", "TLR-CPL", "", "status", "", "", "Tallis Reach", "",
     "TLR-RTU", "DI07", "", "", "", ""],
    ["FNH.SC2.P", "p_flow", "FNH-SC2", "from", "MW", "300", "0.5", "Fenwick Hollow",
     "FNH-TD4", "FNH-RTU", "AI14", "1200:1", "132000:110", "", ""],
    ["ORB.G1.P", "p_injection", "ORBG21", "", "MW", "120", "0.5", "Orrin Bay", "ORB-TD2",
     "ORB-RTU", "AI03", "4000:5", "21000:110", "", ""],
    ["TLR.AUX.V", "v_magnitude", "TLRAUX", "", "kV", "0.5", "0.5", "Tallis Reach", "TLR-TD8",
     "TLR-RTU", "AI12", "", "400:110", "", ""],
]
NEW_VALUES = ["1", "41.5", "80.2", "0.402"]


def real_site_files():
    files = real_model_files()
    for row in NEW_POINTS:
        files.points.add_row(row)
    week = files.snapshots["week.csv"]
    week.header += [row[0] for row in NEW_POINTS]
    for record in week.rows:
        record += NEW_VALUES
    return files


def test_real_model_features_load_without_any_problem(tmp_path):
    site = load_site(real_site_files().write(tmp_path))
    assert site.problems == []
    net = site.network
    br, buses = net.branches, net.buses
    assert br.at["FNH-SC2", "kind"] == "series_capacitor" and br.at["FNH-SC2", "x"] == -0.018
    assert br.at["ORB-T3M", "x"] == -0.006  # star branch of a three-winding transformer
    assert br.at["TLR-CPL", "x"] == 1e-5 and br.at["TLR-CPL", "r"] == 0.0
    assert br.at["ORB-PST", "shift_deg"] == -12.5
    assert (br.at["TLR-T2", "tap"], br.at["ORB-T3L", "tap"]) == (0.85, 1.15)
    parallel = br[(br["from_bus"] == "FNH132") & (br["to_bus"] == "TLR132")]
    assert list(parallel.index) == ["FNH-TLR-1", "FNH-TLR-2"]
    assert buses.at["ORB220", "b_shunt_mvar"] == -150.0
    assert buses.loc[["TLRAUX", "ORBG21", "ORB220"], "kv"].tolist() == [0.4, 21.0, 220.0]
    zero = set(buses.index[net.zero_injection_positions])
    assert {"ORBSTAR", "FNHSC", "ORB132"} <= zero
    status = site.points.loc["TLR.CPL.CB"]
    assert status["device"] == "" and np.isnan(status["full_scale"])
    assert site.snapshots.at[site.snapshots.index[0], "TLR.AUX.V"] == 0.402


def matpower_arrays(net: Network) -> tuple[np.ndarray, np.ndarray]:
    """Bus and branch arrays in the MATPOWER version 2 layout (buses numbered from 1 in table
    order; a branch that is not a transformer gets TAP 0, MATPOWER's "no tap")."""
    number = {b: i + 1 for i, b in enumerate(net.buses.index)}
    bus = np.zeros((net.n_bus, 13))
    bus[:, 0] = np.arange(1, net.n_bus + 1)
    bus[:, 1] = [3 if b == net.reference_bus else 1 for b in net.buses.index]
    bus[:, 4], bus[:, 5] = net.buses["g_shunt_mw"], net.buses["b_shunt_mvar"]
    bus[:, 6], bus[:, 7], bus[:, 9] = 1, 1.0, net.buses["kv"]
    bus[:, 10], bus[:, 11], bus[:, 12] = 1, 1.1, 0.9
    br = net.branches
    branch = np.zeros((net.n_branch, 13))
    branch[:, 0] = [number[b] for b in br["from_bus"]]
    branch[:, 1] = [number[b] for b in br["to_bus"]]
    branch[:, 2], branch[:, 3], branch[:, 4] = br["r"], br["x"], br["b"]
    branch[:, 8] = np.where(br["kind"] == "transformer", br["tap"], 0.0)
    branch[:, 9], branch[:, 10], branch[:, 11], branch[:, 12] = br["shift_deg"], 1, -360, 360
    return bus, branch


def assert_admittances_match_pypower(net: Network, bus: np.ndarray, branch: np.ndarray):
    ours = [m.toarray() for m in net.admittance_matrices()]
    bus, branch = bus.copy(), branch.copy()
    bus[:, 0] -= 1  # makeYbus takes pypower's internal numbering, from 0
    branch[:, :2] -= 1
    reference = [m.toarray() for m in makeYbus(net.base_mva, bus, branch)]
    for a, b in zip(ours, reference, strict=True):
        # the coupler's 1/(j·1e-5) = -j·1e5 sets the scale: relative to the largest entry
        np.testing.assert_allclose(a, b, rtol=1e-12, atol=1e-12 * np.abs(b).max())


def test_real_model_admittances_equal_pypower(tmp_path):
    net = load_site(real_site_files().write(tmp_path)).network
    assert_admittances_match_pypower(net, *matpower_arrays(net))


# ----------------------------------------------------------------------------- warnings
WARNED = [
    # On-load tap changers span about ±10-20 % (REFERENCES.md, common practice, no source);
    # published models stay within 0.88-1.20.
    pytest.param("TLR-T2", "tap", "0.75", "tap",
                 "tap 0.75 is outside the usual 0.8-1.2: check that it is the off-nominal "
                 "ratio in per unit on the from side, not a ratio of rated voltages or a "
                 "percentage", id="tap-low"),
    pytest.param("ORB-T3L", "tap", "1.25", "tap", "tap 1.25 is outside the usual 0.8-1.2",
                 id="tap-high"),
    pytest.param("TLR-T2", "tap", "85", "tap", "tap 85 is outside", id="tap-in-percent"),
    pytest.param("TLR-T1", "tap", "6", "tap", "tap 6 is outside", id="tap-as-kv-ratio"),
    # A series capacitor's reactance is negative (physics: X = -1/(ωC)).
    pytest.param("FNH-SC2", "x", "0.018", "x",
                 "a series capacitor has a negative reactance, but x is 0.018: check the sign",
                 id="capacitor-positive-x"),
    # An overhead line's own series reactance is positive and a series capacitor carries no
    # line charging (physics); none of the published models has a line with x < 0 and b > 0.
    pytest.param("FNH-TLR-2", "x", "-0.061", "x",
                 "negative reactance -0.061 on a line with line charging (b = 0.021): check "
                 "the sign; a series capacitor belongs on a branch of its own (kind "
                 "series_capacitor)", id="line-negative-x-with-charging"),
    # Only transformers have taps and phase shifts (common practice, no source).
    pytest.param("FNH-TLR-2", "tap", "1.05", "kind",
                 "a line has neither tap nor phase shift, but this branch has tap 1.05, which "
                 "the model applies; is it a transformer?", id="line-with-tap"),
    pytest.param("FNH-TLR-2", "shift_deg", "5", "kind",
                 "but this branch has phase shift 5 degrees", id="line-with-shift"),
    pytest.param("FNH-SC2", "tap", "0.95", "kind", "a series capacitor has neither tap",
                 id="capacitor-with-tap"),
]


@pytest.mark.parametrize("branch,column,value,at,message", WARNED)
def test_unusual_values_load_with_one_warning(tmp_path, branch, column, value, at, message):
    files = real_site_files()
    row = row_of(files.branches, branch)
    files.branches.set(row, column, value)
    site = load_site(files.write(tmp_path))
    assert message in find(site.problems, BRANCHES, row, at, "warning").message
    assert len(site.problems) == 1


QUIET = [
    pytest.param("branches", "TLR-T2", {"tap": "0.8"}, id="tap-at-lower-edge"),
    pytest.param("branches", "ORB-T3L", {"tap": "1.2"}, id="tap-at-upper-edge"),
    # The Icelandic grid has a line with x = -0.40174 pu, r = 0, b = 0 (published model): a
    # series capacitor or an equivalent written as a line.
    pytest.param("branches", "FNHSC-ORB", {"r": "0", "x": "-0.40174", "b": "0"},
                 id="line-negative-x-no-charging"),
    # The GB reduced network has 13 branches with negative charging (published model).
    pytest.param("branches", "FNH-TLR-2", {"b": "-0.004"}, id="negative-charging"),
    pytest.param("branches", "ORB-PST", {"shift_deg": "60"}, id="large-phase-shift"),
    pytest.param("branches", "ORB-T3H", {"shift_deg": "-30"}, id="vector-group-shift"),
    pytest.param("branches", "ORB-T3M", {"r": "-0.0001"}, id="equivalent-negative-r"),
    pytest.param("branches", "TLR-CPL", {"x": "-0.00001"}, id="coupler-negative-x"),
    # Published models: couplers with x = 1e-4 pu (REFERENCES.md).
    pytest.param("branches", "TLR-CPL", {"x": "0.0001", "r": "0.00001"},
                 id="coupler-as-published"),
    pytest.param("branches", "TLR-CPL", {"in_service": "false"}, id="coupler-open"),
    # Published models: shunts up to 342 Mvar (PEGASE 2869), buses from 0.22 kV (Iceland).
    pytest.param("buses", "ORB220", {"b_shunt_mvar": "-400"}, id="large-reactor"),
    pytest.param("buses", "TLRAUX", {"kv": "0.22"}, id="220-volt-bus"),
]


@pytest.mark.parametrize("table,element,changes", QUIET)
def test_real_model_values_load_without_warning(tmp_path, table, element, changes):
    files = real_site_files()
    rows = getattr(files, table)
    row = row_of(rows, element)
    for column, value in changes.items():
        rows.set(row, column, value)
    assert load_site(files.write(tmp_path)).problems == []


def test_branch_without_impedance_stays_an_error(tmp_path):
    # r = x = 0 makes 1/(r + jx) infinite: such a branch has no π model. Published models give
    # couplers x ≈ 1e-4 pu (REFERENCES.md); none of them has r = x = 0.
    files = real_site_files()
    row = row_of(files.branches, "TLR-CPL")
    files.branches.set(row, "x", "0")
    p = find(problems_of(files.write(tmp_path)), BRANCHES, row, "x")
    assert p.message == (
        "r and x are both zero: a branch without impedance cannot be modelled; give a bus "
        "coupler a small reactance (for example x = 0.0001 pu, as published network models "
        "do) or merge its two buses into one")


# ----------------------------------------------------------------------------- CDF
def cdf_text(tmp_path, changes: dict[tuple[str, int], float] | None = None):
    """The real-model network written as a CDF file (one generator at the reference bus),
    with ``changes`` {(branch id, MATPOWER branch column): value} applied first; also the
    MATPOWER arrays and the card row of each branch id."""
    net = load_site(real_site_files().write(tmp_path)).network
    bus, branch = matpower_arrays(net)
    for (name, column), value in (changes or {}).items():
        branch[net.branches.index.get_loc(name), column] = value
    gen = np.zeros((1, 10))
    gen[0, 0], gen[0, 5], gen[0, 7] = bus[bus[:, 1] == 3, 0][0], 1.02, 1
    text = write_cdf({"baseMVA": net.base_mva, "bus": bus, "gen": gen, "branch": branch},
                     "Fenwick Hollow")
    header = text.splitlines().index(next(ln for ln in text.splitlines()
                                          if ln.startswith("BRANCH DATA"))) + 1
    rows = {b: header + 1 + k for k, b in enumerate(net.branches.index)}
    return text, bus, branch, rows


def test_cdf_reader_takes_real_model_features(tmp_path):
    text, bus, branch, _ = cdf_text(tmp_path)
    case = read_cdf(text)
    assert case.problems == []
    br = case.network.branches
    assert (br["x"] < 0).sum() == 2  # the series capacitor and the star branch
    assert br["shift_deg"].tolist().count(-12.5) == 1
    assert sorted(br["tap"].unique()) == [0.85, 0.985, 1.0, 1.025, 1.15]
    assert br["x"].abs().min() == 1e-5
    assert case.network.buses["kv"].min() == 0.4
    # the file has no loads: a star point (bus 7, ORBSTAR) is zero-injection, the 220 kV bus
    # with its reactor (bus 6, ORB220) is not (the CDF rule of the reader's docstring)
    zero = case.network.buses["zero_injection"]
    assert zero["7"] and not zero["6"]
    assert case.network.buses.at["6", "b_shunt_mvar"] == pytest.approx(-150.0)
    assert_admittances_match_pypower(case.network, bus, branch)


# MATPOWER branch columns: BR_B 4, TAP 8 (REFERENCES.md, MATPOWER case format version 2).
CDF_WARNED = [
    pytest.param("TLR-T2", 8, 0.7, "final turns ratio", "tap 0.7 is outside the usual",
                 id="tap"),
    pytest.param("FNH-SC2", 4, 0.01, "X", "negative reactance -0.018 on a line with line "
                 "charging (B = 0.01)", id="negative-x-with-charging"),
]


@pytest.mark.parametrize("branch_id,column,value,at,message", CDF_WARNED)
def test_cdf_warnings(tmp_path, branch_id, column, value, at, message):
    text, _, _, rows = cdf_text(tmp_path, {(branch_id, column): value})
    case = read_cdf(text)
    assert message in find(case.problems, CDF, rows[branch_id], at, "warning").message
    assert len(case.problems) == 1


def test_cdf_negative_turns_ratio_is_an_error(tmp_path):
    text, _, _, rows = cdf_text(tmp_path, {("TLR-T2", 8): -0.95})
    with pytest.raises(CdfFormatError) as info:
        read_cdf(text)
    p = find(info.value.problems, CDF, rows["TLR-T2"], "final turns ratio")
    assert p.message == "-0.95 is negative; a turns ratio is positive (0 means 1, a line)"


def test_cdf_branch_without_impedance_names_the_remedy(tmp_path):
    text, _, _, rows = cdf_text(tmp_path, {("TLR-CPL", 3): 0.0})
    with pytest.raises(CdfFormatError) as info:
        read_cdf(text)
    p = find(info.value.problems, CDF, rows["TLR-CPL"], "X")
    assert p.message.startswith("R and X are both zero: a branch without impedance cannot")
    assert "X = 0.0001 pu" in p.message
