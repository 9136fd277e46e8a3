"""A small valid site for the robustness tests: the invented Brackwater district.

Five buses in four substations (132/33 kV), a transformer, a zero-injection switching station,
a simulated point list and a few dozen quarter-hourly snapshots from our own power flow, all
written as text files (CSV and TOML) that the tests mutate in memory and write to a folder.
Times in the snapshot file are naive local times of America/Halifax, so daylight-saving
mutations mean something (its rule changes the offset twice a year; the tests derive the
change times from the IANA database through zoneinfo, not from memory).
"""

from __future__ import annotations

import csv
import io
import tempfile
from dataclasses import dataclass, field
from functools import cache
from pathlib import Path

import numpy as np
import pandas as pd

from calibra.model.network import Network
from calibra.model.site import Site
from calibra.simulate.case import GridCase
from calibra.simulate.metering import MeteringOptions, make_point_list
from calibra.simulate.telemetry import TelemetryOptions, simulate_site
from calibra.simulate.writer import write_network, write_points, write_site_toml

TIMEZONE = "America/Halifax"
START = "2026-04-14 06:00"
PERIODS = 36
FREQ = "15min"
SNAPSHOT_FILE = "snapshots/day.csv"


def brackwater_case() -> GridCase:
    """The invented network with a light operating point (values typical, no source)."""
    buses = pd.DataFrame(
        {
            "substation": ["Wrenfold", "Cassock Hill", "Cassock Hill", "Emberlow", "Tidewick"],
            "kv": [132.0, 132.0, 33.0, 132.0, 33.0],
            "zero_injection": [False, False, False, True, False],
            "g_shunt_mw": 0.0,
            "b_shunt_mvar": [0.0, 0.0, 3.0, 0.0, 0.0],
            "name": ["Wrenfold 132", "Cassock Hill 132", "Cassock Hill 33", "Emberlow 132",
                     "Tidewick 33"],
        },
        index=pd.Index(["WRF_132", "CSH_132", "CSH_33", "EMB_132", "TDW_33"], name="bus"),
    )
    branches = pd.DataFrame(
        {
            "from_bus": ["WRF_132", "WRF_132", "EMB_132", "CSH_132", "CSH_33"],
            "to_bus": ["CSH_132", "EMB_132", "CSH_132", "CSH_33", "TDW_33"],
            "r": [0.011, 0.008, 0.009, 0.003, 0.028],
            "x": [0.058, 0.041, 0.047, 0.118, 0.079],
            "b": [0.019, 0.014, 0.016, 0.0, 0.002],
            "tap": [1.0, 1.0, 1.0, 0.99, 1.0],
            "shift_deg": 0.0,
            "kind": ["line", "line", "line", "transformer", "line"],
            "in_service": True,
            "name": ["Wrenfold-Cassock", "Wrenfold-Emberlow", "Emberlow-Cassock",
                     "Cassock Hill T1", "Cassock-Tidewick"],
        },
        index=pd.Index(["WRF-CSH", "WRF-EMB", "EMB-CSH", "CSH-T1", "CSH-TDW"], name="branch"),
    )
    net = Network("Brackwater district", 100.0, buses, branches, "WRF_132", 60.0)
    s = pd.Series
    return GridCase(net, load_mw=s({"CSH_132": 35.0, "CSH_33": 28.0, "TDW_33": 14.0}),
                    load_mvar=s({"CSH_132": 9.0, "CSH_33": 7.0, "TDW_33": 4.0}),
                    gen_mw=s({"WRF_132": 0.0}), gen_mvar=s(dtype=float),
                    v_set=s({"WRF_132": 1.02}), pv=s({"WRF_132": False}))


def snapshot_csv(snapshots: pd.DataFrame, timezone: str) -> str:
    """The snapshot frame as CSV text with naive local times, values with 6 significant
    digits (as a historian export would give them)."""
    local = snapshots.index.tz_convert(timezone).strftime("%Y-%m-%d %H:%M:%S")
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(["timestamp", *snapshots.columns])
    values = snapshots.to_numpy(float)
    for stamp, row in zip(local, values, strict=True):
        writer.writerow([stamp, *("" if np.isnan(v) else f"{v:.6g}" for v in row)])
    return out.getvalue()


@dataclass(frozen=True)
class SiteTexts:
    """The files of a site folder as bytes, by path relative to the folder."""

    files: dict[str, bytes] = field(default_factory=dict)

    def write(self, root: Path) -> Path:
        """The files in ``root`` (with a ``snapshots`` folder, even when it stays empty)."""
        (root / "snapshots").mkdir(parents=True, exist_ok=True)
        for rel, content in self.files.items():
            path = root / rel
            path.parent.mkdir(parents=True, exist_ok=True)
            path.write_bytes(content)
        return root


@cache
def brackwater() -> tuple[SiteTexts, Site]:
    """The valid files and the simulated site they were written from."""
    case = brackwater_case()
    points = make_point_list(case, options=MeteringOptions(branch_end_coverage=1.0,
                                                           voltage_coverage=1.0), seed=3)
    sim = simulate_site(case, points, start=START, periods=PERIODS, freq=FREQ,
                        timezone=TIMEZONE, seed=3, faults=False, outages=None,
                        options=TelemetryOptions(missing_rate=0.0, gaps_per_point=0.0,
                                                 rtu_outage_hours=0.0),
                        name="Brackwater district")
    site = sim.site
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        write_site_toml(site, root / "site.toml")
        write_network(site, root / "network")
        write_points(site.points, root / "points.csv")
        files = {rel: (root / rel).read_bytes()
                 for rel in ("site.toml", "network/buses.csv", "network/branches.csv",
                             "points.csv")}
    files[SNAPSHOT_FILE] = snapshot_csv(site.snapshots, TIMEZONE).encode("utf-8")
    return SiteTexts(files), site
