"""Exports are safe: a review of a site whose tags, devices, RTUs, substations and name attack
spreadsheets, file systems and HTML writes CSV cells no spreadsheet runs as formulas, keeps
every file inside the output folder, and still prints the PDF work orders.

A spreadsheet runs a cell as a formula when it starts with ``=``, ``+``, ``-`` or ``@`` (or a
tab, CR or LF before one); OWASP's advice on CSV injection (from memory) is to make such
cells text with a leading single quote.
"""

from __future__ import annotations

import contextlib
import csv
import io
import os
import re
import shutil
import subprocess

import pandas as pd
import pytest

from calibra.cli import main
from calibra.io import load_site
from calibra.reports import work_order_pages, write_work_orders_html
from tests.robustness.hostile_site import SITE_NAME, hostile_sample

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")  # before PySide6 is imported

TRIGGERS = ("=", "+", "-", "@", "\t", "\r", "\n", "＝", "＋", "－", "＠")
PLAIN_NUMBER = re.compile(r"[+-]?(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?")
OUTPUTS = {"findings.csv", "work_orders.csv", "work_orders.pdf", "summary.txt", "summary.json"}


@pytest.fixture(scope="module")
def reviewed(tmp_path_factory):
    """The hostile site, reviewed through ``calibra review`` with the PDF."""
    base = tmp_path_factory.mktemp("hostile")
    maps = hostile_sample(base / "site")
    before = sorted(p.relative_to(base) for p in base.rglob("*"))
    output = io.StringIO()
    with contextlib.redirect_stdout(output), contextlib.redirect_stderr(output):
        code = main(["review", str(base / "site"), "--out", str(base / "out"), "--no-ledger"])
    assert code == 0, output.getvalue()
    return base, maps, before, output.getvalue()


def _cells(path) -> list[list[str]]:
    with path.open(encoding="utf-8-sig", newline="") as handle:
        return list(csv.reader(handle))


def _inert(cell: str) -> bool:
    """A cell a spreadsheet shows as it is: empty, a plain number, or text that does not
    start (after spaces) with a formula trigger."""
    return cell == "" or bool(PLAIN_NUMBER.fullmatch(cell)) or not (
        cell.startswith(("\t", "\r", "\n")) or cell.lstrip(" ").startswith(TRIGGERS))


def _unquoted(cell: str) -> str:
    return cell[1:] if cell.startswith("'") and cell[1:].lstrip(" ").startswith(TRIGGERS) \
        else cell


@pytest.mark.parametrize("name", ["findings.csv", "work_orders.csv"])
def test_no_csv_cell_runs_as_a_formula(reviewed, name):
    base, maps, _, _ = reviewed
    rows = _cells(base / "out" / name)
    bad = [cell for row in rows for cell in row if not _inert(cell)]
    assert bad == []
    quoted = [cell for row in rows for cell in row if cell.startswith("'")]
    # the hostile names did reach the file, made text by the leading quote
    assert any(c.startswith("'=") for c in quoted) and any(c.startswith("'-") for c in quoted)
    assert any(c.startswith("'@") for c in quoted)


def test_findings_csv_keeps_every_name(reviewed):
    base, maps, _, _ = reviewed
    rows = _cells(base / "out" / "findings.csv")
    header, records = rows[0], rows[1:]
    assert len(records) >= 10
    site = load_site(base / "site")
    for record in records:
        row = dict(zip(header, (_unquoted(c) for c in record), strict=True))
        assert row["tag"] in site.points.index
        assert row["device"] == site.points.at[row["tag"], "device"]
        assert row["substation"] == site.points.at[row["tag"], "substation"]
        assert row["finding_id"].startswith(row["tag"] + "|")
    hostile_substations = {_unquoted(r[header.index("substation")]) for r in records}
    assert {"<script>alert(1)</script>", "=cmd|' /C calc'!A0"} <= hostile_substations


def test_files_stay_in_the_output_folder(reviewed, tmp_path):
    base, _, before, _ = reviewed
    assert sorted(p.name for p in (base / "out").iterdir()) == sorted(OUTPUTS)
    after = sorted(p.relative_to(base) for p in base.rglob("*")
                   if p.relative_to(base).parts[0] != "out")
    assert after == before, "the review wrote outside its output folder"
    # one page per substation with field work, named from hostile substation names
    findings = pd.read_csv(base / "out" / "findings.csv", dtype=str, keep_default_na=False,
                           encoding="utf-8-sig").map(_unquoted)
    site = load_site(base / "site")
    pages = work_order_pages(site.name, findings, site.points, pd.Timestamp("2027-03-02"))
    folder = tmp_path / "pages"
    written = write_work_orders_html(pages, folder)
    assert set(written) == set(pages) and len(pages) >= 3
    for path in written.values():
        assert path.parent == folder.resolve() and path.is_file()
        assert ".." not in path.name and "/" not in path.name and "\\" not in path.name
    assert list(tmp_path.iterdir()) == [folder]


def test_the_pdf_is_printed_with_odd_names(reviewed):
    base, _, _, output = reviewed
    pdf = base / "out" / "work_orders.pdf"
    assert f"wrote work orders (PDF sheets): {pdf}" in output
    assert pdf.read_bytes().startswith(b"%PDF-") and pdf.stat().st_size > 10_000
    if shutil.which("pdftotext") is None:
        pytest.skip("poppler-utils (pdftotext) is not installed: cannot read the PDF back")
    text = subprocess.run(["pdftotext", str(pdf), "-"], capture_output=True, text=True,
                          check=True).stdout
    # markup, quotes and accents print as the names are, not as HTML
    for name in ("Field checklist: <script>alert(1)</script>",
                 "Field checklist: =cmd|' /C calc'!A0", SITE_NAME, "IED <1> & co"):
        assert name in text, name
