"""The printed checklist: HTML escaping, the PDF through Qt, checked with poppler's tools.

Safety wording is checked against the sources named in /work/shared/REFERENCES.md
("Safety cautions for field checklists"): OSHA 29 CFR 1910.269 and UFC 3-560-01 (CT
secondary), MIL-HDBK-1025/10 (VT secondary), NFPA 70E §120.5 and OSHA 1910.333(b)
(electrically safe work condition, lockout/tagout), IEEE C57.13.3 (single ground point).
"""

import os
import re
import shutil
import struct
import subprocess
import sys
import unicodedata

import numpy as np
import pandas as pd
import pytest

from calibra.reports import (
    SAFETY_CAUTIONS,
    work_order_html,
    work_order_pages,
    work_order_sheets,
)
from tests.reports.conftest import ODD_SUBSTATION

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

GENERATED = pd.Timestamp("2026-03-10T09:15", tz="UTC")
PERIOD = (pd.Timestamp("2026-03-02", tz="UTC"), pd.Timestamp("2026-03-09", tz="UTC"))
SOURCES = ["OSHA 29 CFR 1910.269", "UFC 3-560-01", "MIL-HDBK-1025/10", "NFPA 70E §120.5",
           "OSHA 29 CFR 1910.333(b)", "IEEE C57.13.3"]
SAFETY_PHRASES = ["Never open the secondary circuit of a CT", "Never short a VT secondary",
                  "lockout/tagout", "test for absence of voltage", "grounded at one point only",
                  "qualified personnel", "advisory"]
needs_poppler = pytest.mark.skipif(
    shutil.which("pdftoppm") is None or shutil.which("pdftotext") is None,
    reason="poppler-utils (pdftoppm, pdftotext) is not installed: cannot inspect the PDF")


def _words(text: str) -> str:
    """Whitespace collapsed, ligatures (ﬁ) unfolded as pdftotext may emit them."""
    return re.sub(r"\s+", " ", unicodedata.normalize("NFKC", text))


def test_html_escapes_user_data(findings, points):
    page = work_order_html("Fern<hollow>", ODD_SUBSTATION, findings, points, GENERATED, PERIOD)
    assert "<North>" not in page and "&lt;North&gt;" in page
    assert "AV-IED-&lt;7&gt;" in page and "Fern&lt;hollow&gt;" in page
    assert "&quot;Ölmühle&quot;" in page and "Ash &amp; Vale" in page
    assert "2026-03-02 00:00 UTC to 2026-03-09 00:00 UTC" in page


def test_html_carries_the_cautions_with_their_sources(findings, points):
    page = _words(work_order_html("Fernhollow", "Marlow Cross", findings, points, GENERATED))
    for source in SOURCES:
        assert source in page
    for caution in SAFETY_CAUTIONS:
        assert caution.text.replace("'", "&#x27;") in page
    assert "Review period</b></td><td>not given" in page


def test_one_page_per_substation_and_none_for_others(findings, points):
    pages = work_order_pages("Fernhollow", findings, points, GENERATED, PERIOD)
    assert list(pages) == sorted({ODD_SUBSTATION, "Marlow Cross", "Kestrel Bank"})
    with pytest.raises(ValueError, match="no findings for substation 'Nowhere'"):
        work_order_html("Fernhollow", "Nowhere", findings, points, GENERATED)


def _pdf_text(path, first=None, last=None) -> str:
    args = ["pdftotext", "-enc", "UTF-8"]
    if first is not None:
        args += ["-f", str(first), "-l", str(last)]
    return subprocess.run([*args, str(path), "-"], check=True, capture_output=True,
                          text=True).stdout


def _page_count(path) -> int:
    info = subprocess.run(["pdfinfo", str(path)], check=True, capture_output=True, text=True)
    return int(re.search(r"Pages:\s+(\d+)", info.stdout).group(1))


@needs_poppler
def test_pdf_prints_every_substation_with_cautions_and_tags(findings, points, tmp_path):
    from calibra.gui.qt_pdf import sheets_to_pdf

    pages = work_order_sheets("Fernhollow", findings, points, GENERATED, PERIOD)
    path = sheets_to_pdf(list(pages.values()), tmp_path / "orders.pdf", title="Fernhollow",
                         footer="Fernhollow work orders")
    assert path.read_bytes().startswith(b"%PDF-")
    text = _words(_pdf_text(path))
    for tag in findings["tag"]:
        assert tag in text
    for phrase in SAFETY_PHRASES + SOURCES:
        assert phrase in text, phrase
    n = _page_count(path)
    assert n >= len(pages)
    assert "page 1 of 1" in text and "Fernhollow work orders" in text
    # every substation starts a sheet of its own
    starts = [_words(_pdf_text(path, k, k)).strip() for k in range(1, n + 1)]
    for name in pages:
        assert any(s.startswith(f"Field checklist: {_words(name)}") for s in starts), name


@needs_poppler
def test_pdf_renders_to_readable_png_pages(findings, points, tmp_path):
    from calibra.gui.qt_pdf import sheets_to_pdf

    pages = work_order_sheets("Fernhollow", findings, points, GENERATED, PERIOD)
    path = sheets_to_pdf([pages["Marlow Cross"]], tmp_path / "mc.pdf")
    subprocess.run(["pdftoppm", "-r", "60", "-png", str(path), str(tmp_path / "mc")],
                   check=True)
    pngs = sorted(tmp_path.glob("mc*.png"))
    assert len(pngs) == _page_count(path)
    data = pngs[0].read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    width, height = struct.unpack(">II", data[16:24])
    assert height / width == pytest.approx(297 / 210, rel=0.01), "A4 portrait (ISO 216)"
    subprocess.run(["pdftoppm", "-r", "40", "-gray", "-f", "1", "-l", "1", str(path),
                    str(tmp_path / "gray")], check=True)
    (pgm,) = tmp_path.glob("gray*.pgm")
    raw = pgm.read_bytes()
    header = re.match(rb"P5\s+(\d+)\s+(\d+)\s+255\s", raw)
    w, h = int(header.group(1)), int(header.group(2))
    pixels = np.frombuffer(raw[header.end():], dtype=np.uint8, count=w * h)
    ink = (pixels < 128).mean()
    assert 0.01 < ink < 0.3, f"text on the page, not blank and not black (ink {ink:.3f})"


def test_pdf_needs_pages(tmp_path):
    from calibra.gui.qt_pdf import sheets_to_pdf

    with pytest.raises(ValueError, match="no pages"):
        sheets_to_pdf([], tmp_path / "x.pdf")


def test_reports_and_ledger_import_without_qt():
    code = ("import sys, calibra.reports, calibra.ledger; "
            "sys.exit(any(m.split('.')[0] in ('PySide6', 'pyqtgraph') for m in sys.modules))")
    assert subprocess.run([sys.executable, "-c", code]).returncode == 0
