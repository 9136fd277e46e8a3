"""Write a Site to a site folder (site.toml, network/, points.csv, snapshots/), plus ground truth.

Snapshots go to one Parquet file per local calendar day, ``snapshots/<YYYY-MM-DD>.parquet``,
zstd-compressed, values as float32. The ``timestamp`` column is written tz-aware in UTC
(Parquet ``timestamp[ms, tz=UTC]``), so times are unambiguous across daylight-saving changes;
the site's timezone in site.toml says how to show them. The ground truth of seeded faults goes
to ``truth/faults.csv``; tests read it, the tool never does.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from calibra.model.network import BRANCH_COLUMNS, BUS_COLUMNS, TAP_CHANGER_COLUMNS
from calibra.model.points import POINT_COLUMNS, REPORTING_COLUMNS
from calibra.model.site import Site
from calibra.simulate.model_errors import MODEL_TRUTH_FILE

TRUTH_FILE = Path("truth") / "faults.csv"


def _toml_value(value) -> str:
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)  # a TOML basic string
    return repr(float(value))


def _bool_text(series: pd.Series) -> pd.Series:
    return series.fillna(True).astype(bool).map({True: "true", False: "false"})


def write_site_toml(site: Site, path: Path) -> None:
    net = site.network
    lines = [
        "[site]",
        f"name = {_toml_value(site.name)}",
        f"base_mva = {_toml_value(net.base_mva)}",
        f"frequency_hz = {_toml_value(net.frequency_hz)}",
        f"timezone = {_toml_value(site.timezone)}",
        f"reference_bus = {_toml_value(net.reference_bus)}",
    ]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


def write_network(site: Site, folder: Path) -> None:
    net = site.network
    folder.mkdir(parents=True, exist_ok=True)
    buses = net.buses.reindex(columns=BUS_COLUMNS).copy()
    buses["zero_injection"] = _bool_text(buses["zero_injection"].fillna(False))
    buses.rename_axis("bus").to_csv(folder / "buses.csv", encoding="utf-8")
    taps = [c for c in TAP_CHANGER_COLUMNS if c in net.branches]
    branches = net.branches.reindex(columns=BRANCH_COLUMNS + taps).copy()
    branches["in_service"] = _bool_text(branches["in_service"])
    branches.rename_axis("branch").to_csv(folder / "branches.csv", encoding="utf-8")


def write_points(points: pd.DataFrame, path: Path) -> None:
    """points.csv with the columns of :data:`POINT_COLUMNS`; the stated deadband and resolution
    (:data:`REPORTING_COLUMNS`) only when some point states one, so a point list that leaves
    them to the data is written as before."""
    columns = [c for c in POINT_COLUMNS if c not in REPORTING_COLUMNS
               or (c in points and points[c].notna().any())]
    table = points.reindex(columns=columns).copy()
    if "channel" in table:
        table["channel"] = table["channel"].astype("Int64")
    table.rename_axis("tag").to_csv(path, encoding="utf-8")


def write_snapshots(site: Site, folder: Path) -> list[Path]:
    """One zstd Parquet file per local day; returns the files written."""
    folder.mkdir(parents=True, exist_ok=True)
    snaps = site.snapshots
    if snaps.index.tz is None:
        raise ValueError("snapshot index must be tz-aware")
    day = snaps.index.tz_convert(site.timezone).strftime("%Y-%m-%d")
    written = []
    for name in pd.unique(np.asarray(day)):
        part = snaps[np.asarray(day == name)]
        arrays = [pa.array(part.index.tz_convert("UTC").as_unit("ms"), pa.timestamp("ms", "UTC"))]
        arrays += [pa.array(part[c].to_numpy(np.float32), pa.float32()) for c in part.columns]
        table = pa.Table.from_arrays(arrays, names=["timestamp", *map(str, part.columns)])
        path = folder / f"{name}.parquet"
        pq.write_table(
            table, path, compression="zstd", compression_level=9,
            use_byte_stream_split=[str(c) for c in part.columns], use_dictionary=False,
        )
        written.append(path)
    return written


def write_truth(truth: pd.DataFrame, path: Path) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    out = truth.copy()
    if "onset" in out and len(out):
        out["onset"] = pd.DatetimeIndex(out["onset"]).tz_convert("UTC").strftime(
            "%Y-%m-%dT%H:%M:%SZ")
    out.to_csv(path, index=False, encoding="utf-8")


def write_site(site: Site, folder: str | Path, truth: pd.DataFrame | None = None,
               model_truth: pd.DataFrame | None = None) -> Path:
    """Write ``site`` as a site folder at ``folder`` (created; existing snapshot files replaced).

    ``truth`` (the fault table of a simulation) goes to ``truth/faults.csv``; ``model_truth``
    (wrong network parameters), when it has rows, to ``truth/model_errors.csv``.
    """
    root = Path(folder)
    root.mkdir(parents=True, exist_ok=True)
    write_site_toml(site, root / "site.toml")
    write_network(site, root / "network")
    write_points(site.points, root / "points.csv")
    snap_dir = root / "snapshots"
    if snap_dir.exists():
        for old in snap_dir.glob("*.parquet"):
            old.unlink()
    write_snapshots(site, snap_dir)
    if truth is not None:
        write_truth(truth, root / TRUTH_FILE)
    if model_truth is not None and len(model_truth):
        (root / TRUTH_FILE).parent.mkdir(parents=True, exist_ok=True)
        model_truth.to_csv(root / TRUTH_FILE.parent / MODEL_TRUTH_FILE, index=False,
                           encoding="utf-8")
    return root
