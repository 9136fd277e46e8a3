"""The commissioning loop from the command line, as a user runs it: review → correct a device in
software → review (still on the work orders, as corrected) → mark repaired inside the period
while the fault is still there → review (reopened: the repair did not clear it) → the meter
really fixed after the repair time → review (verified).

Network: IEEE 57 (pypower's case57, a published test system); the fault is a reversed CT
(both P and Q of one device), the commonest commissioning fault (common practice, no source).
"""

from __future__ import annotations

import csv
from dataclasses import replace

import pytest

from calibra.cli import main
from calibra.simulate.writer import write_site
from tests.diagnosis.scenarios import reversed_device_scenario


@pytest.fixture(scope="module")
def reversed_device():
    sim, device, tags = reversed_device_scenario("case57", 23)
    return sim.site, device, tags


def _rows(path) -> list[dict]:
    with open(path, encoding="utf-8-sig", newline="") as f:
        return list(csv.DictReader(f))


def _review(folder, out) -> tuple[dict, list[dict]]:
    assert main(["review", str(folder), "--out", str(out), "--no-pdf"]) == 0
    findings = {r["finding_id"]: r for r in _rows(out / "findings.csv")}
    return findings, _rows(out / "work_orders.csv")


def test_the_loop_from_the_command_line(reversed_device, tmp_path, capsys):
    site, device, tags = reversed_device
    folder = write_site(site, tmp_path / "site")
    ids = [f"{t}|reversed" for t in tags]

    found, _ = _review(folder, tmp_path / "r1")
    assert set(ids) <= set(found)

    # One action on the device corrects both channels.
    assert main(["ledger", str(folder), "correct", device, "--user", "test"]) == 0
    out = capsys.readouterr().out
    assert all(f"{t}: corrected in software" in out for t in tags)

    found, orders = _review(folder, tmp_path / "r2")
    for fid in ids:
        assert found[fid]["state"] == "corrected"
        assert found[fid]["in_this_review"] == "false"
        assert "corrected in software since" in found[fid]["evidence"]
    assert any(device == r["device"] for r in orders), "corrected device left the work orders"

    # Marked repaired at mid-period, but the data after it are still reversed.
    mid = site.snapshots.index[len(site.snapshots) // 2]
    local = mid.tz_convert(site.timezone).strftime("%Y-%m-%d %H:%M")
    assert main(["ledger", str(folder), "repaired", device, "--at", local, "--user", "test"]) == 0
    found, orders = _review(folder, tmp_path / "r3")
    for fid in ids:
        assert found[fid]["state"] == "new"
        assert "did not clear it" in found[fid]["reopened"]
        assert found[fid]["evidence"].startswith("the repair on ")
    assert any(device == r["device"] for r in orders)
    assert main(["ledger", str(folder)]) == 0
    assert "did not clear it" in capsys.readouterr().out

    # The crew really fixes it later; marked repaired then, the next review verifies it.
    fixed_at = site.snapshots.index[3 * len(site.snapshots) // 4]
    snaps = site.snapshots.copy()
    snaps.loc[fixed_at:, list(tags)] *= -1.0
    write_site(replace(site, snapshots=snaps), folder)
    at = fixed_at.tz_convert("UTC").strftime("%Y-%m-%dT%H:%M:%SZ")
    assert main(["ledger", str(folder), "repaired", device, "--at", at, "--user", "test"]) == 0
    found, orders = _review(folder, tmp_path / "r4")
    assert not set(ids) & set(found)
    assert not any(device == r["device"] for r in orders)
    assert main(["ledger", str(folder), "history", device]) == 0
    history = capsys.readouterr().out
    assert "verify" in history and "reopen" in history


def test_ledger_command_errors_name_the_item(reversed_device, tmp_path, capsys):
    site, device, tags = reversed_device
    folder = write_site(site, tmp_path / "site")
    assert main(["ledger", str(folder)]) == 2  # no ledger yet
    assert "run 'calibra review" in capsys.readouterr().err
    _review(folder, tmp_path / "r")
    assert main(["ledger", str(folder), "confirm", "NO.SUCH.TAG"]) == 2
    assert "NO.SUCH.TAG: not a finding id, tag or device" in capsys.readouterr().err
    assert main(["ledger", str(folder), "repaired", device, "--at", "yesterday-ish"]) == 2
    assert "not a time" in capsys.readouterr().err
    assert main(["ledger", str(folder), "undo"]) == 2  # nothing of the user's to undo
    assert main(["ledger", str(folder), "confirm", tags[0]]) == 0
    assert main(["ledger", str(folder), "undo"]) == 0
    capsys.readouterr()
    assert main(["ledger", str(folder), "history", tags[0]]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert any(" confirm " in line and "(undone by" in line for line in lines)
    assert any(" undo " in line for line in lines)
