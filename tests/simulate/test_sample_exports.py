"""The sample site as a utility's three exports, and the round trip: ``calibra import`` of
them, then ``calibra review``, gives the findings of ``calibra review sample_site``.

Outside references: pypower's Newton power flow (a general-purpose reference library, test
only) solves the MATPOWER case written here to the voltages of our own power flow, so the file
carries the network and operating point the MATPOWER case format (Zimmerman et al. 2011)
defines; openpyxl (an independent reader) reads the spreadsheet. The round trip compares two
of our own reviews; the values the quality codes remove are accounted for one by one.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from pypower.api import ppoption, runpf

from calibra.cli import main
from calibra.io import load_site
from calibra.io.matpower import read_matpower
from calibra.simulate.matpower_case import matpower_case_text
from calibra.simulate.sample_exports import (
    GIVEN_COLUMNS,
    HEADERS,
    MAX_AGE,
    SAMPLE_SITE,
    import_command,
)
from calibra.simulate.sample_site import tarrowmere_case


@pytest.fixture(scope="module")
def sample():
    return load_site(SAMPLE_SITE)


@pytest.fixture(scope="module")
def exported(sample_exports):
    return sample_exports


def _matrix(text: str, name: str) -> np.ndarray:
    body = re.search(rf"mpc\.{name} = \[(.*?)\];", text, re.S).group(1)
    rows = [line.strip().rstrip(";").split() for line in body.strip().splitlines()]
    return np.array([[float(v) for v in row] for row in rows if row])


def test_case_file_solves_to_our_power_flow_in_pypower(sample):
    case = tarrowmere_case()
    text, ids = matpower_case_text(sample.network, case, "tarrowmere", "test")
    ppc = {"version": "2", "baseMVA": 100.0, "bus": _matrix(text, "bus"),
           "gen": _matrix(text, "gen"), "branch": _matrix(text, "branch")}
    result, ok = runpf(ppc, ppoption(VERBOSE=0, OUT_ALL=0))
    assert ok
    ours = case.solve()
    assert ours.converged
    np.testing.assert_allclose(result["bus"][:, 7], ours.vm, atol=1e-6)  # VM, pu
    np.testing.assert_allclose(np.radians(result["bus"][:, 8]), ours.va_rad, atol=1e-6)  # VA


def test_case_file_reads_back_as_the_sample_network(sample, exported):
    out, record = exported
    read = read_matpower(out / "tarrowmere.m", frequency_hz=50.0).network
    net = sample.network
    numbers = record.ids.buses
    assert list(read.buses.index) == [str(numbers[b]) for b in net.buses.index]
    for column in ("kv", "zero_injection", "g_shunt_mw", "b_shunt_mvar"):
        np.testing.assert_array_equal(read.buses[column].to_numpy(), net.buses[column].to_numpy())
    branches = read.branches.loc[[record.ids.branches[b] for b in net.branches.index]]
    for column in ("r", "x", "b", "tap", "shift_deg", "in_service", "kind"):
        np.testing.assert_array_equal(branches[column].to_numpy(), net.branches[column].to_numpy())
    assert read.reference_bus == str(numbers[net.reference_bus])


def test_spreadsheet_holds_the_point_list_with_the_utilitys_headers(sample, exported):
    openpyxl = pytest.importorskip("openpyxl")
    out, record = exported
    book = openpyxl.load_workbook(out / "tarrowmere-points.xlsx")
    assert book.sheetnames == ["Revisions", "Telemetry"]
    rows = list(book["Telemetry"].iter_rows(values_only=True))
    assert rows[2] == tuple(HEADERS.values())
    body = pd.DataFrame(rows[3:], columns=list(HEADERS)).set_index("tag")
    points = sample.points
    assert list(body.index) == list(points.index)
    assert set(body["unit"]) == {"MW", "Mvar", "kV", "amps", "status"}
    ratios = body["ct_ratio"].dropna()
    assert ratios.str.fullmatch(r"\d+/\d+").all()
    assert (ratios.str.replace("/", ":") == points.loc[ratios.index, "ct_ratio"]).all()
    branch_of = {v: k for k, v in record.ids.branches.items()}
    bus_of = {str(v): k for k, v in record.ids.buses.items()}
    elements = [branch_of.get(e) or bus_of[e] for e in body["element"]]
    assert elements == list(points["element"])
    np.testing.assert_array_equal(body["full_scale"].astype(float).to_numpy(),
                                  points["full_scale"].to_numpy())


@pytest.fixture(scope="module")
def imported(exported, tmp_path_factory):
    out, record = exported
    folder = tmp_path_factory.mktemp("imported") / "tarrowmere"
    argv = ["import", str(folder), "--history", *map(str, sorted((out / "history").iterdir())),
            "--points", str(out / "tarrowmere-points.xlsx"), "--sheet", "Telemetry",
            "--network", str(out / "tarrowmere.m"), "--name", "Tarrowmere regional grid",
            "--timezone", "Europe/Oslo", "--frequency", "50", "--max-age", MAX_AGE]
    for column in GIVEN_COLUMNS:
        argv += ["--column", f"{column}={HEADERS[column]}"]
    assert main(argv) == 0
    return folder, record


def test_import_command_printed_is_the_one_tested():
    text = import_command(Path("x"), Path("t"))
    assert "--max-age 15min" in text and '--column tag="SCADA point"' in text


def test_imported_values_are_the_sample_values_less_what_the_codes_remove(sample, imported):
    folder, record = imported
    site = load_site(folder)
    assert site.snapshots.index.equals(sample.snapshots.index)
    assert list(site.points.index) == list(sample.points.index)
    got, want = site.snapshots.copy(), sample.snapshots.copy()
    for tag, at in record.dropped:  # invalid with a value: the loader must drop it
        assert np.isnan(got.at[at, tag]) and not np.isnan(want.at[at, tag])
        want.at[at, tag] = np.nan
    assert len(record.dropped) == 60
    for tag, band in record.by_exception.items():  # held within the deadband
        assert (got[tag].isna() == want[tag].isna()).all()
        assert (got[tag] - want[tag]).abs().max() <= band * (1 + 1e-6)
    plain = [t for t in want.columns if t not in record.by_exception]
    np.testing.assert_allclose(got[plain].to_numpy(), want[plain].to_numpy(), rtol=2e-7,
                               equal_nan=True)
    tag, start, end = record.substituted
    reported = [p for p in site.problems if p.column == "quality"
                and f"point '{tag}'" in p.message and "substituted" in p.message]
    assert reported and "09:00 CET" in reported[0].message and "11:30 CET" in reported[0].message


def test_review_of_the_import_gives_the_sample_findings(imported, tmp_path):
    folder, _ = imported
    assert main(["review", str(SAMPLE_SITE), "--out", str(tmp_path / "ref"), "--no-ledger",
                 "--no-pdf"]) == 0
    assert main(["review", str(folder), "--out", str(tmp_path / "new"), "--no-ledger",
                 "--no-pdf"]) == 0
    ref = pd.read_csv(tmp_path / "ref" / "findings.csv").set_index(["tag", "finding"])
    new = pd.read_csv(tmp_path / "new" / "findings.csv").set_index(["tag", "finding"])
    assert sorted(new.index) == sorted(ref.index)
    new = new.loc[ref.index]
    for column, tolerance in (("factor", 2e-3), ("offset", 0.02), ("drift_per_day", 0.01)):
        np.testing.assert_allclose(new[column].to_numpy(float), ref[column].to_numpy(float),
                                   atol=tolerance, equal_nan=True)
    assert (new["onset"].fillna("") == ref["onset"].fillna("")).all()
    assert (new["substation"] == ref["substation"]).all()
