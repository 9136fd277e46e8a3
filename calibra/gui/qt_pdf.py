"""Print HTML pages (such as the field checklists) to a PDF with Qt's rich-text engine.

Each page string is laid out as its own ``QTextDocument`` and starts on a new sheet; a
footer numbers the sheets. Works headless: without a running Qt application one is created
on the offscreen platform.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from pathlib import Path

_APP = None  # keeps a Qt application created here alive

A4_MARGINS_MM = (15.0, 14.0, 15.0, 12.0)  # left, top, right, bottom
FOOTER_MM = 7.0


def _application():
    """The running Qt application, or a new offscreen ``QGuiApplication``."""
    global _APP
    from PySide6.QtGui import QGuiApplication

    app = QGuiApplication.instance()
    if app is None:
        os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
        app = _APP = QGuiApplication(["calibra"])
    return app


def html_to_pdf(pages: Sequence[str], path: str | Path, *, title: str = "",
                footer: str = "") -> Path:
    """Write ``pages`` (HTML strings) to the PDF ``path`` on A4 portrait.

    Sheets are numbered "page k of n" over the whole file, after ``footer`` when given.
    """
    if not pages:
        raise ValueError("no pages to print")
    app = _application()
    from PySide6.QtCore import QMarginsF, QRectF, QSizeF, Qt
    from PySide6.QtGui import QFont, QPageLayout, QPageSize, QPainter, QPdfWriter, QTextDocument

    path = Path(path)
    writer = QPdfWriter(str(path))
    writer.setPageSize(QPageSize(QPageSize.PageSizeId.A4))
    writer.setPageMargins(QMarginsF(*A4_MARGINS_MM), QPageLayout.Unit.Millimeter)
    writer.setTitle(title)
    writer.setCreator("calibra")
    sheet = writer.pageLayout().paintRectPixels(writer.resolution())
    footer_px = FOOTER_MM / 25.4 * writer.resolution()
    # lay out at the screen's logical resolution, as a browser would, then scale to the writer
    scale = writer.resolution() / app.primaryScreen().logicalDotsPerInchY()
    body = QSizeF(sheet.width() / scale, (sheet.height() - footer_px) / scale)
    documents = []
    for html in pages:
        doc = QTextDocument()
        doc.setHtml(html)
        doc.setPageSize(body)
        documents.append(doc)
    total = sum(doc.pageCount() for doc in documents)
    painter = QPainter()
    if not painter.begin(writer):
        raise OSError(f"cannot write the PDF {path}")
    try:
        font = QFont("DejaVu Sans")
        font.setPointSizeF(7.5)
        number = 0
        for doc in documents:
            for page in range(doc.pageCount()):
                if number:
                    writer.newPage()
                number += 1
                painter.save()
                painter.scale(scale, scale)
                painter.translate(0, -page * body.height())
                doc.drawContents(painter, QRectF(0, page * body.height(), body.width(),
                                                 body.height()))
                painter.restore()
                painter.setFont(font)
                label = f"{footer} — page {number} of {total}" if footer else (
                    f"page {number} of {total}")
                painter.drawText(QRectF(0, sheet.height() - footer_px, sheet.width(),
                                        footer_px), Qt.AlignRight | Qt.AlignBottom, label)
    finally:
        painter.end()
    return path
