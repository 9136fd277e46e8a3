"""Print field checklists (:class:`calibra.reports.Sheet`) to a PDF or a printer with Qt's
rich-text engine, page by page.

Each sheet is laid out by :meth:`Sheet.pages` with a measure taken here (does this page's HTML
fit one A4 body?), so no table row is ever split over two pages; every substation starts on a
new page and its pages are numbered "page i of n" for that substation in the footer, beside
the site's name and the reminder that findings are advisory. Works headless: without a running
Qt application one is created on the offscreen platform.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from pathlib import Path

from calibra.reports.sheet_pages import Sheet

_APP = None  # keeps a Qt application created here alive

A4_MARGINS_MM = (15.0, 14.0, 15.0, 12.0)  # left, top, right, bottom
FOOTER_MM = 7.0
ADVISORY = "findings are advisory: confirm in the field before changing anything"


def _application():
    """The running Qt application, or a new offscreen ``QApplication`` (a widgets one, so
    that the desktop windows can still open in the same process)."""
    global _APP
    from PySide6.QtWidgets import QApplication

    app = QApplication.instance()
    if app is None:
        os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
        app = _APP = QApplication(["calibra"])
    return app


def footer_text(site: str, substation: str, page: int, pages: int) -> tuple[str, str]:
    """Left and right footer of one page: site, substation and advisory; page i of n."""
    left = " · ".join(x for x in (site, substation, ADVISORY) if x)
    return left, f"page {page} of {pages}"


def sheets_to_pdf(sheets: Sequence[Sheet], path: str | Path, *, title: str = "",
                  footer: str = "") -> Path:
    """Write ``sheets`` to the PDF ``path`` on A4 portrait (``footer``: the site's name)."""
    if not sheets:
        raise ValueError("no pages to print")
    _application()
    from PySide6.QtCore import QMarginsF
    from PySide6.QtGui import QPageLayout, QPageSize, QPdfWriter

    path = Path(path)
    writer = QPdfWriter(str(path))
    writer.setPageSize(QPageSize(QPageSize.PageSizeId.A4))
    writer.setPageMargins(QMarginsF(*A4_MARGINS_MM), QPageLayout.Unit.Millimeter)
    writer.setTitle(title)
    writer.setCreator("calibra")
    if not paint_sheets(writer, sheets, footer):
        raise OSError(f"cannot write the PDF {path}")
    return path


def paint_sheets(device, sheets: Sequence[Sheet], footer: str = "") -> bool:
    """Paint ``sheets`` on a paged paint device (``QPdfWriter`` or ``QPrinter``), one
    substation after another, each page laid out so that nothing is split; False when the
    device cannot be painted on."""
    app = _application()
    from PySide6.QtCore import QRectF, QSizeF, Qt
    from PySide6.QtGui import QFont, QPainter, QTextDocument

    resolution = device.resolution()
    sheet_rect = device.pageLayout().paintRectPixels(resolution)
    footer_px = FOOTER_MM / 25.4 * resolution
    # lay out at the screen's logical resolution, as a browser would, then scale to the device
    scale = resolution / app.primaryScreen().logicalDotsPerInchY()
    body = QSizeF(sheet_rect.width() / scale, (sheet_rect.height() - footer_px) / scale)

    def document(html: str) -> QTextDocument:
        doc = QTextDocument()
        doc.setHtml(html)
        doc.setPageSize(body)
        return doc

    def fits(html: str) -> bool:
        return document(html).pageCount() == 1

    laid_out = [(sheet.substation, [document(h) for h in sheet.pages(fits)]) for sheet in sheets]
    painter = QPainter()
    if not painter.begin(device):
        return False
    try:
        font = QFont("DejaVu Sans")
        font.setPointSizeF(7.0)
        first = True
        for substation, docs in laid_out:
            for number, doc in enumerate(docs, start=1):
                # a page longer than a sheet (one block taller than a page) goes on as needed
                for part in range(doc.pageCount()):
                    if not first:
                        device.newPage()
                    first = False
                    painter.save()
                    painter.scale(scale, scale)
                    painter.translate(0, -part * body.height())
                    doc.drawContents(painter, QRectF(0, part * body.height(), body.width(),
                                                     body.height()))
                    painter.restore()
                    painter.setFont(font)
                    left, right = footer_text(footer, substation, number, len(docs))
                    box = QRectF(0, sheet_rect.height() - footer_px, sheet_rect.width(),
                                 footer_px)
                    painter.drawText(box, Qt.AlignLeft | Qt.AlignBottom, left)
                    painter.drawText(box, Qt.AlignRight | Qt.AlignBottom, right)
    finally:
        painter.end()
    return True
