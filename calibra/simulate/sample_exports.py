"""The bundled sample site as the three exports a utility hands over, to try ``calibra import``.

From ``sample_site/`` (the invented Tarrowmere grid) this writes into OUT:

- ``history/tarrowmere-YYYY-MM-DD.csv.gz``: the week as a long historian export, one file per
  local day, rows shuffled within each file; columns ``tagname,timestamp,value,quality``,
  times in local time with their UTC offset, one sample a minute (on the minute). Quality
  codes as IEC 61850-7-3 words: mostly ``good``; ``invalid`` where the sample site has no
  value (empty value) and on a few other samples (value kept, so the loader must drop it);
  ``questionable`` on a few samples; a stretch of ``good|substituted`` on one point (values
  back-filled from the RTU's buffer). A few points are stored by exception: a value only when
  it moves more than a small deadband from the last stored one, and at least every
  :data:`HEARTBEAT` (the historian's longest storage interval), so the import needs
  ``--max-age 15min``.
- ``tarrowmere-points.xlsx``: the point list with the utility's own headers (sheet
  ``Telemetry`` after a ``Revisions`` sheet, a title row above the header), CT and VT ratios
  written ``500/5``, units ``MW``, ``Mvar``, ``kV``, ``amps``; elements named by the case
  file's ids.
- ``tarrowmere.m``: the network as a MATPOWER case file (buses numbered 1…40).

Nothing in calibra imports this module. Run it with::

    python3 -m calibra.simulate.sample_exports OUT

(about half a minute on two cores; see ``sample_site/README.md`` for the import command.)
"""

from __future__ import annotations

import argparse
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from calibra.io import load_site
from calibra.model.points import STATUS_QUANTITY
from calibra.model.site import Site
from calibra.simulate.matpower_case import CaseIds, matpower_case_text
from calibra.simulate.sample_site import tarrowmere_case
from calibra.simulate.xlsx_writer import write_xlsx

SAMPLE_SITE = Path(__file__).resolve().parents[2] / "sample_site"
HEARTBEAT = pd.Timedelta("10min")
MAX_AGE = "15min"  # what the import is told: longer than the heartbeat
#: Deadband of the points stored by exception, share of full scale (status points: a change).
DEADBAND_SHARE = 0.001
GOOD, BAD, QUESTIONABLE, SUBSTITUTED = "good", "invalid", "questionable", "good|substituted"
EXTRA_BAD, QUESTIONABLE_SHARE = 60, 0.002
SUBSTITUTED_LOCAL = ("2027-03-03 09:00", "2027-03-03 11:30")
HEADERS = {  # the utility's header for each of calibra's columns
    "tag": "SCADA point", "quantity": "Meas. type", "element": "Equipment", "end": "Terminal",
    "unit": "Eng units", "full_scale": "Span", "accuracy_pct": "Accuracy class",
    "substation": "Station", "device": "Transducer", "rtu": "Outstation", "channel": "Ch",
    "ct_ratio": "CT ratio", "vt_ratio": "VT ratio", "sigma": "Std dev", "note": "Remarks",
}
#: The import options the headers need (the others are recognised names).
GIVEN_COLUMNS = ("tag", "quantity", "end")
UNITS = {"A": "amps", "Mvar": "Mvar", "MW": "MW", "kV": "kV", "status": "status"}


@dataclass
class ExportRecord:
    """What the export did to the sample site's values (for the round-trip test): the
    samples written ``invalid`` although they had a value, the points stored by exception
    with their deadband, the substituted stretch, and the number of questionable samples."""

    dropped: list[tuple[str, pd.Timestamp]] = field(default_factory=list)
    by_exception: dict[str, float] = field(default_factory=dict)
    substituted: tuple[str, pd.Timestamp, pd.Timestamp] | None = None
    questionable: int = 0
    files: list[Path] = field(default_factory=list)
    ids: CaseIds | None = None


def _healthy(site: Site, folder: Path) -> list[str]:
    truth = folder / "truth" / "faults.csv"
    faulty = set(pd.read_csv(truth)["tag"]) if truth.is_file() else set()
    points = site.points
    return [t for t in points.index if t not in faulty and points.at[t, "quantity"]
            != STATUS_QUANTITY]


def _by_exception(values: np.ndarray, deadband: float) -> np.ndarray:
    """Which samples a historian storing by exception keeps (see the module docstring)."""
    keep = np.zeros(len(values), bool)
    last, since = np.nan, 0
    step = int(HEARTBEAT / pd.Timedelta("1min"))
    for k, v in enumerate(values):
        since += 1
        if np.isnan(v) or np.isnan(last) or abs(v - last) > deadband or since >= step:
            keep[k], since = True, 0
            last = v
    return keep


def _quality(site: Site, healthy: list[str], rng: np.random.Generator,
             record: ExportRecord) -> tuple[np.ndarray, np.ndarray]:
    """Per snapshot × point: the quality word and whether the sample is stored."""
    snaps, points = site.snapshots, site.points
    values = snaps.to_numpy(np.float64)
    quality = np.full(values.shape, GOOD, dtype=object)
    quality[np.isnan(values)] = BAD
    stored = np.ones(values.shape, bool)
    col = {t: k for k, t in enumerate(snaps.columns)}
    voltages = [t for t in healthy if points.at[t, "quantity"] == "v_magnitude"][:4]
    status = [t for t in points.index if points.at[t, "quantity"] == STATUS_QUANTITY][:6]
    for tag in voltages + status:
        band = 0.5 if tag in status else DEADBAND_SHARE * float(points.at[tag, "full_scale"])
        stored[:, col[tag]] = _by_exception(values[:, col[tag]], band)
        record.by_exception[tag] = band
    plain = [t for t in healthy if t not in record.by_exception]
    rows, cols = values.shape
    picks = rng.choice(rows * len(plain), EXTRA_BAD + int(QUESTIONABLE_SHARE * rows * len(plain)),
                       replace=False)
    for n, pick in enumerate(picks):
        r, tag = divmod(int(pick), len(plain))
        c = col[plain[tag]]
        if np.isnan(values[r, c]):
            continue
        if n < EXTRA_BAD:
            quality[r, c] = BAD
            record.dropped.append((plain[tag], snaps.index[r]))
        else:
            quality[r, c] = QUESTIONABLE
            record.questionable += 1
    tag = plain[len(plain) // 2]
    start, end = (pd.Timestamp(t).tz_localize(site.timezone).tz_convert("UTC")
                  for t in SUBSTITUTED_LOCAL)
    inside = (snaps.index >= start) & (snaps.index <= end) & (quality[:, col[tag]] == GOOD)
    quality[inside, col[tag]] = SUBSTITUTED
    record.substituted = (tag, start, end)
    return quality, stored


def _stamps(times: pd.DatetimeIndex, timezone: str) -> np.ndarray:
    """ISO 8601 local times with their UTC offset (``2027-03-01T00:59:51+01:00``)."""
    local = times.tz_convert(timezone).tz_localize(None)
    offsets = np.asarray((local - times.tz_localize(None)).total_seconds(), dtype=np.int64)
    naive = np.datetime_as_string(local.to_numpy().astype("M8[s]"), unit="s").astype(object)
    suffix = np.empty(len(offsets), dtype=object)
    for offset in np.unique(offsets):
        sign, size = "-" if offset < 0 else "+", abs(int(offset))
        suffix[offsets == offset] = f"{sign}{size // 3600:02d}:{size % 3600 // 60:02d}"
    return naive + suffix


def write_history(site: Site, out: Path, quality: np.ndarray, stored: np.ndarray,
                  rng: np.random.Generator, record: ExportRecord) -> None:
    """One gzip-compressed long export per local day (rows shuffled within each file)."""
    snaps = site.snapshots
    values = snaps.to_numpy(np.float64)
    tags = np.asarray(snaps.columns, dtype=object)
    days = snaps.index.tz_convert(site.timezone).normalize()
    out.mkdir(parents=True, exist_ok=True)
    for day in days.unique():
        rows = np.flatnonzero(days == day)
        r, c = np.nonzero(stored[rows])
        r = rows[r]
        times = snaps.index[r]
        order = rng.permutation(len(r))
        frame = pd.DataFrame({"tagname": tags[c][order],
                              "timestamp": _stamps(times, site.timezone)[order],
                              "value": values[r, c][order], "quality": quality[r, c][order]})
        path = out / f"tarrowmere-{day:%Y-%m-%d}.csv.gz"
        frame.to_csv(path, index=False, float_format="%.7g",
                     compression={"method": "gzip", "compresslevel": 6, "mtime": 0})
        record.files.append(path)


def point_sheet(site: Site, ids: CaseIds) -> list[list]:
    """The point list as the utility's sheet: title row, blank row, header, one row per point."""
    points = site.points
    branch_ids, bus_numbers = ids.branches, ids.buses
    rows: list[list] = [["Tarrowmere regional grid: telemetry point list, issue 2027-02"], [],
                        list(HEADERS.values())]
    for tag, p in points.iterrows():
        element = branch_ids.get(p["element"]) or str(bus_numbers[p["element"]])
        cells = {"tag": tag, "element": element, "unit": UNITS[p["unit"]],
                 "ct_ratio": p["ct_ratio"].replace(":", "/") if p["ct_ratio"] else None,
                 "vt_ratio": p["vt_ratio"].replace(":", "/") if p["vt_ratio"] else None}
        for column in HEADERS:
            if column in cells:
                continue
            value = p[column]
            if isinstance(value, float) and np.isnan(value):
                value = None
            elif column == "channel" and str(value).isdigit():
                value = int(value)
            cells[column] = value if value != "" else None
        rows.append([cells[c] for c in HEADERS])
    return rows


def write_sample_exports(out: Path, folder: Path = SAMPLE_SITE, seed: int = 11) -> ExportRecord:
    """Write the three exports of the site folder into ``out`` (see the module docstring)."""
    site = load_site(folder)
    rng = np.random.default_rng(seed)
    record = ExportRecord()
    out.mkdir(parents=True, exist_ok=True)
    text, ids = matpower_case_text(site.network, tarrowmere_case(), "tarrowmere",
                                   "Tarrowmere regional grid (invented), peak-load case")
    (out / "tarrowmere.m").write_text(text + "\n", encoding="utf-8")
    record.ids = ids
    revisions = [["Issue", "Date", "Change"], ["2027-01", "2027-01-18", "first issue"],
                 ["2027-02", "2027-02-22", "Norrance 110/33 kV substation added"]]
    write_xlsx(out / "tarrowmere-points.xlsx",
               {"Revisions": revisions, "Telemetry": point_sheet(site, ids)})
    quality, stored = _quality(site, _healthy(site, folder), rng, record)
    write_history(site, out / "history", quality, stored, rng, record)
    return record


def import_command(out: Path, folder: Path) -> str:
    """The ``calibra import`` command line for the exports in ``out``."""
    given = " ".join(f'--column {c}="{HEADERS[c]}"' for c in GIVEN_COLUMNS)
    return (f"calibra import {folder} --history {out}/history/*.csv.gz --points "
            f"{out}/tarrowmere-points.xlsx --sheet Telemetry --network {out}/tarrowmere.m "
            f'--name "Tarrowmere regional grid" --timezone Europe/Oslo --frequency 50 '
            f"--max-age {MAX_AGE} {given}")


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(
        description="Write the sample site as a historian export, a point-list spreadsheet "
        "and a MATPOWER case file, to try 'calibra import'.")
    parser.add_argument("out", type=Path, help="the folder to write the exports into")
    parser.add_argument("--site", type=Path, default=SAMPLE_SITE, help="the site folder")
    parser.add_argument("--seed", type=int, default=11)
    args = parser.parse_args(argv)
    t0 = time.perf_counter()
    record = write_sample_exports(args.out, args.site, args.seed)
    size = sum(p.stat().st_size for p in args.out.rglob("*") if p.is_file())
    print(f"wrote {len(record.files)} historian files, tarrowmere-points.xlsx and tarrowmere.m "
          f"to {args.out} ({size / 1e6:.1f} MB) in {time.perf_counter() - t0:.0f} s; "
          f"{len(record.dropped)} samples marked invalid, {record.questionable} questionable, "
          f"{len(record.by_exception)} points stored by exception\n"
          f"try: {import_command(args.out, Path('tarrowmere-imported'))}")


if __name__ == "__main__":
    main()
