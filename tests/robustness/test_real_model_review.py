"""A site with what real network models have — series capacitor, bus coupler of x = 1e-5 pu,
phase shifter, taps 0.85-1.15, parallel circuits, a 150 Mvar reactor, 0.4 and 21 kV buses, a
three-winding transformer's star point — and status points without device, full scale or
accuracy class goes through ``calibra check``, ``estimate`` and ``review``.

The telemetry comes from our own power flow with noise within each accuracy class and no gaps:
on the clean data every finding would be a false alarm; with seeded faults on the series
capacitor, the phase shifter and the star branch of negative reactance, the review must find
exactly those (the simulator's fault list is the truth).
"""

from __future__ import annotations

import csv
from pathlib import Path

import pandas as pd
import pytest

from calibra.cli import main
from calibra.io import load_site
from calibra.simulate.case import GridCase
from calibra.simulate.faults import FaultSpec
from calibra.simulate.metering import MeteringOptions, make_point_list
from calibra.simulate.telemetry import TelemetryOptions, simulate_site
from calibra.simulate.writer import write_site
from tests.io.site_builder import real_model_files

SNAPSHOTS = 180


def _case(root: Path) -> GridCase:
    """The real-model network with a light operating point (values typical, no source)."""
    net = load_site(real_model_files().write(root / "model")).network
    s = pd.Series
    return GridCase(net, load_mw=s({"TLR33": 40.0, "PLM33": 25.0, "TLRAUX": 0.3, "TLR132": 30.0}),
                    load_mvar=s({"TLR33": 10.0, "PLM33": 6.0, "TLRAUX": 0.1, "TLR132": 8.0}),
                    gen_mw=s({"ORBG21": 70.0}), gen_mvar=s(dtype=float),
                    v_set=s({"FNH132": 1.02, "ORBG21": 1.01}), pv=s({"ORBG21": True}))


def _tag(points: pd.DataFrame, quantity: str, element: str, end: str) -> str:
    match = points[(points["quantity"] == quantity) & (points["element"] == element)
                   & (points["end"] == end)]
    return str(match.index[0])


def _seeded_faults(points: pd.DataFrame) -> list[FaultSpec]:
    """A reversed CT on the series capacitor, an offset on the phase shifter, a scale error
    on the star branch with negative reactance."""
    return [
        FaultSpec("reversed", (_tag(points, "p_flow", "FNH-SC2", "from"),
                               _tag(points, "q_flow", "FNH-SC2", "from")), factor=-1.0),
        FaultSpec("offset", (_tag(points, "p_flow", "ORB-PST", "from"),), offset=4.0),
        FaultSpec("scale", (_tag(points, "p_flow", "ORB-T3M", "to"),), factor=1.5),
    ]


def _blank_status_columns(path: Path) -> None:
    """Status points without device; full scale and accuracy class empty or 0, by turns."""
    rows = list(csv.reader(path.open(newline="", encoding="utf-8")))
    head = rows[0]
    q, device, full, accuracy = (head.index(c) for c in
                                 ("quantity", "device", "full_scale", "accuracy_pct"))
    for k, row in enumerate(r for r in rows[1:] if r[q] == "branch_status"):
        row[device] = ""
        row[full], row[accuracy] = ("0", "") if k % 2 else ("", "0")
    with path.open("w", newline="", encoding="utf-8") as f:
        csv.writer(f, lineterminator="\n").writerows(rows)


def _simulated(root: Path, seed_faults: bool) -> tuple[Path, list[FaultSpec]]:
    case = _case(root)
    points = make_point_list(case, options=MeteringOptions(branch_end_coverage=1.0,
                                                           voltage_coverage=1.0), seed=5)
    faults = _seeded_faults(points) if seed_faults else []
    sim = simulate_site(case, points, start="2027-05-03 00:00", periods=SNAPSHOTS,
                        timezone="Europe/Berlin", seed=5, faults=faults or False,
                        outages=None, name="Fenwick Hollow with real-model elements",
                        options=TelemetryOptions(missing_rate=0.0, gaps_per_point=0.0,
                                                 rtu_outage_hours=0.0))
    site = write_site(sim.site, root / "site")
    _blank_status_columns(site / "points.csv")
    return site, faults


@pytest.fixture(scope="module")
def clean(tmp_path_factory) -> Path:
    return _simulated(tmp_path_factory.mktemp("clean"), seed_faults=False)[0]


@pytest.fixture(scope="module")
def faulty(tmp_path_factory) -> tuple[Path, list[FaultSpec]]:
    return _simulated(tmp_path_factory.mktemp("faulty"), seed_faults=True)


def _review(site: Path, out: Path, capsys) -> tuple[pd.DataFrame, str]:
    code = main(["review", str(site), "--out", str(out), "--no-ledger", "--no-pdf",
                 "--min-snapshots", "100"])
    captured = capsys.readouterr()
    assert code == 0 and "Traceback" not in captured.out + captured.err
    return pd.read_csv(out / "findings.csv"), captured.out


def test_check_reports_nothing(clean, capsys):
    assert main(["check", str(clean)]) == 0
    assert capsys.readouterr().out.splitlines()[-1] == "result: usable (0 errors, 0 warnings)"
    points = load_site(clean).points
    status = points[points["quantity"] == "branch_status"]
    assert len(status) > 0 and (status["device"] == "").all()
    assert status["full_scale"].isna().all() and status["accuracy_pct"].isna().all()


def test_estimate_converges_everywhere(clean, capsys):
    assert main(["estimate", str(clean)]) == 0
    captured = capsys.readouterr()
    assert f"converged: {SNAPSHOTS} (100.0%)" in captured.out
    assert "Traceback" not in captured.out + captured.err


def test_review_of_clean_telemetry_finds_nothing(clean, tmp_path, capsys):
    findings, out = _review(clean, tmp_path / "review", capsys)
    assert findings.empty, findings.to_string()
    assert "findings: 0" in out


def test_review_finds_the_seeded_faults_and_nothing_else(faulty, tmp_path, capsys):
    site, faults = faulty
    findings, _ = _review(site, tmp_path / "review", capsys)
    expected = {tag: f.kind for f in faults for tag in f.tags}
    assert dict(zip(findings["tag"], findings["finding"], strict=True)) == expected
