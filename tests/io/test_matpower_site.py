"""A MATPOWER case file as a site's network, and the zero-injection overrides of site.toml.

The network is the invented Harrowdene valley (``fixtures/harrowdene.m``). The end-to-end
review runs on telemetry from our own power flow with one seeded fault; the simulator's fault
list is the truth, as in ``tests/robustness/test_real_model_review.py``.
"""

from pathlib import Path

import pandas as pd
import pytest

from calibra.cli import main
from calibra.io import load_site
from calibra.io.matpower import read_matpower
from calibra.simulate.case import GridCase
from calibra.simulate.faults import FaultSpec
from calibra.simulate.metering import MeteringOptions, make_point_list
from calibra.simulate.telemetry import TelemetryOptions, simulate_site
from calibra.simulate.writer import write_points, write_snapshots
from tests.io.site_builder import SITE_TOML, Table, find, problems_of
from tests.io.test_cdf import cdf_site

HARROWDENE = Path(__file__).parent / "fixtures" / "harrowdene.m"
TOML = SITE_TOML.replace('reference_bus = "FNH132"\n', "").replace("base_mva = 100.0\n", "")


def matpower_site(files, root: Path, toml: str = TOML) -> Path:
    files.toml = toml
    files.buses = files.branches = None
    files.extra["network/harrowdene.m"] = HARROWDENE.read_text()
    files.points = Table(
        "tag,quantity,element,end,unit,full_scale,accuracy_pct,substation,device\n"
        "P12,p_flow,1-2-2,from,MW,120,0.5,Harrowdene,D12\n"
        "V3,v_magnitude,3,,kV,150,0.5,Marrick Fell,D3\n"
    )
    files.snapshots = {"week.csv": "timestamp,P12,V3\n2024-03-04 10:00,10.2,134.2\n"}
    return files.write(root)


def test_site_with_a_matpower_network(files, tmp_path):
    site = load_site(matpower_site(files, tmp_path))
    net = site.network
    assert net.n_bus == 7 and net.base_mva == 100.0 and net.reference_bus == "1"
    assert net.name == "Fenwick Hollow district"
    assert "not read" in find(site.problems, "network/harrowdene.m", 55, "gencost",
                              "warning").message
    assert site.snapshots["P12"].iloc[0] == 10.2


def test_matpower_site_base_must_agree(files, tmp_path):
    matpower_site(files, tmp_path, TOML.replace("[site]\n", "[site]\nbase_mva = 50\n"))
    p = find(problems_of(tmp_path), "site.toml", None, "base_mva")
    assert "differs from the 100 MVA base of network/harrowdene.m" in p.message


@pytest.mark.parametrize("other,expected", [
    ("network/second.m", "has several MATPOWER case files (harrowdene.m, second.m)"),
    ("network/ieee14.cdf", "has both a Common Data Format file and a MATPOWER case file"),
    ("network/buses.csv", "keep one description of the network"),
])
def test_one_network_description(files, tmp_path, other, expected):
    matpower_site(files, tmp_path)
    (tmp_path / other).write_text(HARROWDENE.read_text())
    assert expected in find(problems_of(tmp_path), "network", None, None).message


def test_bad_case_file_in_a_site_is_named(files, tmp_path):
    matpower_site(files, tmp_path)
    path = tmp_path / "network/harrowdene.m"
    path.write_text(path.read_text().replace("6\t7\t0.0110", "6\t9\t0.0110"))
    p = find(problems_of(tmp_path), "network/harrowdene.m", 46, "T_BUS")
    assert p.message == "unknown bus 9"


# ----------------------------------------------------------------------------- overrides
def with_network_table(body: str) -> str:
    return TOML + "\n[network]\n" + body


def zero_buses(site) -> list[str]:
    buses = site.network.buses
    return buses.index[buses["zero_injection"]].tolist()


def test_zero_injection_override(files, tmp_path):
    toml = with_network_table('zero_injection = ["7"]\nnot_zero_injection = [3]\n')
    site = load_site(matpower_site(files, tmp_path, toml))
    assert zero_buses(site) == ["7"]
    assert [p for p in site.problems if p.file == "site.toml"] == []


def test_override_of_a_loaded_bus_is_warned(files, tmp_path):
    toml = with_network_table('zero_injection = ["2"]\n')
    site = load_site(matpower_site(files, tmp_path, toml))
    assert zero_buses(site) == ["2", "3"]
    line = toml.splitlines().index('zero_injection = ["2"]') + 1
    p = find(site.problems, "site.toml", line, "zero_injection", "warning")
    assert "bus 2 has load or generation in network/harrowdene.m" in p.message


@pytest.mark.parametrize("body,key,expected", [
    ('zero_injection = ["12"]\n', "zero_injection", "unknown bus '12'"),
    ('not_zero_injection = ["3", "x"]\n', "not_zero_injection", "unknown bus 'x'"),
    ('zero_injection = "3"\n', "zero_injection", "must be a list of bus ids"),
    ('zero_injection = ["3"]\nnot_zero_injection = ["3"]\n', "not_zero_injection",
     "bus 3 is also listed in zero_injection"),
])
def test_bad_override_is_named(files, tmp_path, body, key, expected):
    toml = with_network_table(body)
    matpower_site(files, tmp_path, toml)
    line = next(k for k, text in enumerate(toml.splitlines(), 1) if text.startswith(key))
    assert expected in find(problems_of(tmp_path), "site.toml", line, key).message


def test_override_applies_to_a_cdf_network(files, tmp_path):
    # The IEEE 14-bus case: bus 7 is its only zero-injection bus (REFERENCES.md).
    cdf_site(files, tmp_path)
    toml = (tmp_path / "site.toml").read_text() + '\n[network]\nnot_zero_injection = ["7"]\n'
    (tmp_path / "site.toml").write_text(toml)
    assert zero_buses(load_site(tmp_path)) == []


def test_override_with_tables_is_ignored_with_a_warning(files, tmp_path):
    files.toml = SITE_TOML + '\n[network]\nzero_injection = ["TLR33"]\n'
    site = load_site(files.write(tmp_path))
    assert site.network.buses.at["TLR33", "zero_injection"] == False  # noqa: E712
    p = find(site.problems, "site.toml", 9, "network", "warning")
    assert "with buses.csv set its zero_injection column instead" in p.message


# ----------------------------------------------------------------------------- end to end
SNAPSHOTS = 192  # two days of quarter-hours: the load varies, so scale and offset differ


def harrowdene_site(root: Path, fault: str | None) -> tuple[Path, list[FaultSpec]]:
    """The fixture's network with the operating point it gives, simulated telemetry (our own
    power flow, noise within each accuracy class) and, as asked, a reversed CT (P and Q) or
    a CT ratio 1.3 times too large (P) on the second 1-2 circuit at bus 1; written as a site
    folder whose network is the .m file itself."""
    case = read_matpower(HARROWDENE)
    data, gens = case.bus_data, case.generators[case.generators["in_service"]]
    grid = GridCase(case.network, load_mw=data["load_mw"], load_mvar=data["load_mvar"],
                    gen_mw=gens.groupby("bus")["p_mw"].sum(), gen_mvar=pd.Series(dtype=float),
                    v_set=gens.groupby("bus")["v_set_pu"].first(),
                    pv=data["bus_type"] == 2)
    points = make_point_list(grid, options=MeteringOptions(branch_end_coverage=1.0,
                                                           voltage_coverage=1.0), seed=11)
    flows = points[(points["element"] == "1-2-2") & (points["end"] == "from")]
    p_tag = flows.index[flows["quantity"] == "p_flow"][0]
    q_tag = flows.index[flows["quantity"] == "q_flow"][0]
    faults = {None: [], "reversed": [FaultSpec("reversed", (p_tag, q_tag), factor=-1.0)],
              "scale": [FaultSpec("scale", (p_tag,), factor=1.3)]}[fault]
    sim = simulate_site(grid, points, start="2027-06-07 00:00", periods=SNAPSHOTS,
                        freq="15min", timezone="Europe/London", seed=11,
                        faults=faults or False, outages=None, name="Harrowdene valley",
                        options=TelemetryOptions(missing_rate=0.0, gaps_per_point=0.0,
                                                 rtu_outage_hours=0.0))
    site = root / "harrowdene"
    (site / "network").mkdir(parents=True)
    (site / "site.toml").write_text('[site]\nname = "Harrowdene valley"\nfrequency_hz = 50\n'
                                    'timezone = "Europe/London"\n')
    (site / "network" / "harrowdene.m").write_text(HARROWDENE.read_text())
    write_points(sim.site.points, site / "points.csv")
    write_snapshots(sim.site, site / "snapshots")
    return site, faults


@pytest.mark.parametrize("fault", [None, "reversed", "scale"])
def test_review_of_a_matpower_site(tmp_path, capsys, fault):
    site, faults = harrowdene_site(tmp_path, fault)
    assert main(["check", str(site)]) == 0
    out = capsys.readouterr().out
    assert out.splitlines()[-1] == "result: usable (0 errors, 2 warnings)", out
    assert main(["estimate", str(site)]) == 0
    assert f"converged: {SNAPSHOTS} (100.0%)" in capsys.readouterr().out
    code = main(["review", str(site), "--out", str(tmp_path / "review"), "--no-ledger",
                 "--no-pdf", "--min-snapshots", "100"])
    captured = capsys.readouterr()
    assert code == 0 and "Traceback" not in captured.out + captured.err
    findings = pd.read_csv(tmp_path / "review" / "findings.csv")
    expected = {tag: f.kind for f in faults for tag in f.tags}
    assert dict(zip(findings["tag"], findings["finding"], strict=True)) == expected


def test_a_network_without_substations_is_not_compared_with_the_point_list(files, tmp_path):
    # A MATPOWER case names no substations (each bus is its own, named by its number): the
    # point list's own substation names are kept and one warning says they are not checked,
    # instead of one warning per point.
    matpower_site(files, tmp_path)
    site = load_site(tmp_path)
    about = [p for p in site.problems if p.column == "substation"]
    assert len(about) == 1 and about[0].row is None and about[0].count == 2
    assert "names no substations" in about[0].message and "'Harrowdene'" in about[0].message
    assert site.points.at["P12", "substation"] == "Harrowdene"
    # an unknown element is still an error
    files.points.set(2, "element", "1-2-9")
    files.write(tmp_path)
    assert "unknown branch '1-2-9'" in find(problems_of(tmp_path), "points.csv", 2,
                                            "element").message
