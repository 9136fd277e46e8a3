"""An invented site, Fernhollow, with findings of every kind over three substations."""

import pandas as pd
import pytest

from calibra.diagnosis.findings import Finding, findings_table

ODD_SUBSTATION = 'Ash & Vale <North> "Ölmühle"'
POINT_ROWS = [
    # tag, quantity, element, end, unit, substation, device, rtu, channel, ct, vt
    ("MC-L1-P", "p_flow", "L1", "from", "MW", "Marlow Cross", "MC-IED-1", "RTU-MC", "4",
     "1200:5", "132000:110"),
    ("MC-L1-Q", "q_flow", "L1", "from", "Mvar", "Marlow Cross", "MC-IED-1", "RTU-MC", "5",
     "1200:5", "132000:110"),
    ("MC-T1-V", "v_magnitude", "MC132", "", "kV", "Marlow Cross", "MC-VT-1", "RTU-MC", "9",
     "", "132000:110"),
    ("MC-L2-I", "i_magnitude", "L2", "from", "A", "Marlow Cross", "MC-IED-2", "RTU-MC", "11",
     "800:5", ""),
    ("AV-L3-P", "p_flow", "L3", "to", "MW", ODD_SUBSTATION, "AV-IED-<7>", "RTU-AV", "1",
     "600:5", "33000:110"),
    ("AV-L3-Q", "q_flow", "L3", "to", "Mvar", ODD_SUBSTATION, "AV-IED-<7>", "RTU-AV", "2",
     "600:5", "33000:110"),
    ("AV-G1-P", "p_injection", "AV33", "", "MW", ODD_SUBSTATION, "AV-IED-9", "RTU-AV", "6",
     "600:5", "33000:110"),
    ("KB-L4-P", "p_flow", "L4", "from", "MW", "Kestrel Bank", "KB-IED-1", "", "", "", ""),
]


def sample_points() -> pd.DataFrame:
    cols = ["tag", "quantity", "element", "end", "unit", "substation", "device", "rtu",
            "channel", "ct_ratio", "vt_ratio"]
    frame = pd.DataFrame(POINT_ROWS, columns=cols).set_index("tag")
    frame["full_scale"] = 200.0
    frame["accuracy_pct"] = 0.5
    return frame


def _finding(points: pd.DataFrame, tag: str, kind: str, evidence: str, **values) -> Finding:
    p = points.loc[tag]
    return Finding(tag=tag, device=p["device"], substation=p["substation"], finding=kind,
                   confidence=0.97, evidence=evidence, quantity=p["quantity"], unit=p["unit"],
                   **values)


def sample_findings(points: pd.DataFrame) -> pd.DataFrame:
    onset = pd.Timestamp("2026-03-04T06:00", tz="UTC")
    return findings_table([
        _finding(points, "MC-L1-P", "reversed", "measured ≈ −1.00 × implied in 1987 of 2016 "
                 "snapshots", factor=-1.0, scope="device"),
        _finding(points, "MC-L1-Q", "reversed", "measured ≈ −0.99 × implied in 1990 of 2016 "
                 "snapshots", factor=-0.99, scope="device"),
        _finding(points, "MC-T1-V", "scale", "reads 76.3 kV where 132.1 kV is implied",
                 factor=0.5774),
        _finding(points, "MC-L2-I", "drift", "error grows 1.9 A a day", drift_per_day=1.9,
                 onset=onset),
        _finding(points, "AV-L3-P", "mismapped", "follows the reactive flow of L3",
                 matched="reactive-power flow at the AV end of L3"),
        _finding(points, "AV-L3-Q", "mismapped", "follows the active flow of L3",
                 matched="active-power flow at the AV end of L3"),
        _finding(points, "AV-G1-P", "offset", "=HYPERLINK(\"http://x\") reads +4.2 MW high",
                 offset=4.2),
        _finding(points, "KB-L4-P", "unverifiable", "no other meter sees L4",
                 action="add a meter of the active- and reactive-power flow at the Marlow Cross "
                 "end of L4; until then check the point against a portable reference meter"),
    ])


@pytest.fixture
def points() -> pd.DataFrame:
    return sample_points()


@pytest.fixture
def findings(points) -> pd.DataFrame:
    return sample_findings(points)
