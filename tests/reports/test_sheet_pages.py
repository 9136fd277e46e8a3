"""The printed checklists page by page: read back with pdftotext (poppler) and checked for
the rules of printed forms in tests/reports/pdf_pages.py (common practice, no source): a
heading and 'page i of n' on every page, continued tables marked, no row cut in two, and the
count of points on the sheet equal to the points it lists."""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import pandas as pd
import pytest

from calibra.diagnosis.findings import Finding, findings_table
from calibra.diagnosis.review import review_site
from calibra.io import load_site
from calibra.reports import Sheet, check_groups, work_order_sheets
from calibra.reports.sheet_pages import CONTINUED, DeviceSection
from tests.reports.pdf_pages import check_pages, read_pages

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
SAMPLE = Path(__file__).resolve().parents[2] / "sample_site"
GENERATED = pd.Timestamp("2027-03-08T09:00", tz="Europe/Oslo")
needs_poppler = pytest.mark.skipif(
    shutil.which("pdftotext") is None or shutil.which("pdfinfo") is None,
    reason="poppler-utils (pdftotext, pdfinfo) is not installed: cannot read the PDF back")


def _expected(findings: pd.DataFrame, points: pd.DataFrame | None):
    checks, tags = {}, {}
    for g in check_groups(findings, points):
        checks.setdefault(g.substation, []).extend(g.checks)
        tags.setdefault(g.substation, set()).update(g.tags)
    return checks, tags


def _print(findings, points, site_name, path):
    from calibra.gui.qt_pdf import sheets_to_pdf

    sheets = work_order_sheets(site_name, findings, points, GENERATED)
    return sheets, sheets_to_pdf(list(sheets.values()), path, footer=site_name)


@pytest.fixture(scope="module")
def sample_findings():
    site = load_site(SAMPLE)
    return site, findings_table(review_site(site).findings)


@needs_poppler
def test_sample_site_sheets_read_back(sample_findings, tmp_path):
    site, findings = sample_findings
    _, path = _print(findings, site.points, site.name, tmp_path / "orders.pdf")
    pages = read_pages(path)
    check_pages(pages, *_expected(findings, site.points))
    nrc = [p for p in pages if p.substation == "NRC"]
    assert len(nrc) >= 2, "the sample's busiest substation runs over a page"
    for page in pages:
        assert "p_flow" not in page.text and "q_flow" not in page.text


def _long_substation(n_devices: int) -> tuple[pd.DataFrame, pd.DataFrame]:
    """An invented substation, Greywater, with many devices, each reversed and scaled."""
    rows, found = [], []
    for k in range(n_devices):
        device = f"GW-IED-{k:02d}"
        for q, unit in (("p_flow", "MW"), ("q_flow", "Mvar")):
            tag = f"GW-L{k:02d}-{q[0].upper()}"
            rows.append((tag, q, f"L{k:02d}", "from", unit, "Greywater", device, "RTU-GW",
                         str(2 * k + (q == "q_flow")), "1200:5", "132000:110"))
            kind = "reversed" if k % 2 else "scale"
            found.append(Finding(tag=tag, device=device, substation="Greywater", finding=kind,
                                 confidence=0.99, evidence=f"{tag} reads against the network "
                                 f"in {9000 + k} of 10,080 snapshots", quantity=q, unit=unit,
                                 factor=-1.0 if kind == "reversed" else 1.5,
                                 scope="device" if kind == "reversed" else "point"))
    for k in range(14):  # one device with many findings: its table runs over a page
        tag = f"GW-B{k:02d}-P"
        rows.append((tag, "p_injection", f"GW{k:02d}", "", "MW", "Greywater", "GW-IED-BUS",
                     "RTU-GW", str(100 + k), "600:5", "33000:110"))
        found.append(Finding(tag=tag, device="GW-IED-BUS", substation="Greywater",
                             finding="offset", confidence=0.98, evidence=f"{tag} reads "
                             f"+{k + 2}.0 MW off the implied value", quantity="p_injection",
                             unit="MW", offset=k + 2.0))
    cols = ["tag", "quantity", "element", "end", "unit", "substation", "device", "rtu",
            "channel", "ct_ratio", "vt_ratio"]
    points = pd.DataFrame(rows, columns=cols).set_index("tag")
    points["full_scale"], points["accuracy_pct"] = 200.0, 0.5
    return points, findings_table(found)


@needs_poppler
def test_long_substation_runs_over_several_pages_unsplit(tmp_path):
    points, findings = _long_substation(24)
    _, path = _print(findings, points, "Greywater grid", tmp_path / "long.pdf")
    pages = read_pages(path)
    assert len(pages) >= 4
    check_pages(pages, *_expected(findings, points))
    assert all(p.substation == "Greywater" for p in pages)
    continued = [p.number for p in pages if any(d.endswith("(continued)") for d in p.devices)]
    assert continued, "the long device table is marked continued on its next page"


def _sheet(units_per_device: list[int], rows_per_unit: int = 3) -> Sheet:
    devices = [DeviceSection(f"Device D{d}", [[f"<tr><td>D{d} u{u} r{r}</td></tr>"
                                               for r in range(rows_per_unit)]
                                              for u in range(n)])
               for d, n in enumerate(units_per_device)]
    return Sheet("S1", "<html><body>", ["<h1>S1</h1>", "<p>safety</p>"], devices,
                 "<p>remarks</p>", [])


def _rows(html: str) -> int:
    return html.count("<tr><td>") + 2 * html.count("<p>") + 3 * html.count("<h2>")


def test_packing_keeps_units_whole_and_marks_continued_tables():
    """Without Qt: a page 'fits' up to 20 row heights (a device heading with its column heads
    takes 3, a paragraph 2)."""
    sheet = _sheet([4, 1, 6])
    pages = sheet.pages(lambda html: _rows(html) <= 20)
    assert len(pages) >= 3 and all(_rows(p) <= 20 for p in pages)
    for p in pages[1:]:
        assert "<h1>S1 (continued)</h1>" in p
    for d, device in enumerate(sheet.devices):
        for u, unit in enumerate(device.units):
            holding = [k for k, p in enumerate(pages) if all(row in p for row in unit)]
            assert len(holding) == 1, (d, u)  # the whole unit on one page
        showing = [k for k, p in enumerate(pages) if f"D{d} u" in p]
        assert f"Device D{d}</h2>" in pages[showing[0]]
        for k in showing[1:]:
            assert f"Device D{d} {CONTINUED}</h2>" in pages[k]
    assert "<p>remarks</p>" in pages[-1]


def test_a_unit_longer_than_a_page_goes_row_by_row():
    sheet = _sheet([1], rows_per_unit=30)
    pages = sheet.pages(lambda html: _rows(html) <= 20)
    text = "".join(pages)
    assert all(f"D0 u0 r{r}<" in text for r in range(30))
    assert len(pages) >= 2 and all(_rows(p) <= 20 for p in pages)
