"""Work orders: pick substations, preview each checklist, save a PDF, print, export CSV.

The pages come from :mod:`calibra.reports` (with the safety cautions on every page); the PDF
from :func:`calibra.gui.qt_pdf.sheets_to_pdf` (laid out page by page, no row split).
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd
from PySide6.QtCore import Qt
from PySide6.QtGui import QTextDocument
from PySide6.QtWidgets import (
    QDialog,
    QFileDialog,
    QHBoxLayout,
    QLabel,
    QListWidget,
    QListWidgetItem,
    QMessageBox,
    QPushButton,
    QSplitter,
    QTextBrowser,
    QVBoxLayout,
    QWidget,
)

from calibra.gui.qt_pdf import paint_sheets, sheets_to_pdf
from calibra.model.site import Site
from calibra.reports import (
    Sheet,
    needing_field_work,
    needing_rtu_work,
    rtu_sheet,
    work_order_sheets,
    write_work_orders_csv,
)
from calibra.reports.model_sheet import MODEL_SHEET_TITLE, model_sheet, needing_model_work
from calibra.reports.rtu_sheet import RTU_SHEET_TITLE


class WorkOrdersDialog(QDialog):
    """Checklists of the substations with findings that still need field work."""

    def __init__(self, site: Site, findings: pd.DataFrame,
                 period: tuple[pd.Timestamp, pd.Timestamp] | None,
                 parent: QWidget | None = None):
        super().__init__(parent)
        self.setWindowTitle(f"Work orders — {site.name}")
        self.resize(1100, 760)
        self.site = site
        self.findings = needing_field_work(findings)
        self.sheets: dict[str, Sheet] = {}
        now = pd.Timestamp.now(tz=site.timezone)
        if len(self.findings):
            self.sheets = work_order_sheets(site.name, self.findings, site.points, now,
                                            period=period)
        rtu_work = needing_rtu_work(findings)
        if len(rtu_work):
            # The RTU/SCADA engineer's sheet (RTU clocks), after the crews' substations.
            self.sheets[RTU_SHEET_TITLE] = rtu_sheet(site.name, rtu_work, site.points, now,
                                                     period)
        model_work = needing_model_work(findings)
        if len(model_work):
            # The network model owner's sheet, last: not field work.
            self.sheets[MODEL_SHEET_TITLE] = model_sheet(site.name, model_work, now, period)
        self.pages = {name: sheet.whole_html() for name, sheet in self.sheets.items()}
        self.substations = QListWidget(self)
        for sub, sheet in self.sheets.items():
            n = len(sheet.tags)
            what = {RTU_SHEET_TITLE: "RTU", MODEL_SHEET_TITLE: "parameter"}.get(sub, "point")
            item = QListWidgetItem(f"{sub}  ({n} {what}{'s' if n != 1 else ''})")
            item.setData(Qt.UserRole, sub)
            item.setFlags(item.flags() | Qt.ItemIsUserCheckable)
            item.setCheckState(Qt.Checked)
            self.substations.addItem(item)
        self.preview = QTextBrowser(self)
        self.status = QLabel("" if self.pages else
                             "No finding needs field work: nothing to print.", self)
        self.status.setWordWrap(True)
        self.pdf_button = QPushButton("Save PDF…", self)
        self.print_button = QPushButton("Print…", self)
        self.csv_button = QPushButton("Export CSV…", self)
        close = QPushButton("Close", self)
        for b in (self.pdf_button, self.print_button, self.csv_button):
            b.setEnabled(bool(self.pages))
        left = QWidget(self)
        lay = QVBoxLayout(left)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.addWidget(QLabel("Substations (tick to include)", left))
        lay.addWidget(self.substations, 1)
        split = QSplitter(Qt.Horizontal, self)
        split.addWidget(left)
        split.addWidget(self.preview)
        split.setStretchFactor(1, 4)
        buttons = QHBoxLayout()
        buttons.addWidget(self.status, 1)
        for b in (self.pdf_button, self.print_button, self.csv_button, close):
            buttons.addWidget(b)
        layout = QVBoxLayout(self)
        layout.addWidget(split, 1)
        layout.addLayout(buttons)
        self.substations.currentItemChanged.connect(self._on_current_changed)
        self.pdf_button.clicked.connect(lambda: self.save_pdf())
        self.print_button.clicked.connect(lambda: self.print_pages())
        self.csv_button.clicked.connect(lambda: self.export_csv())
        close.clicked.connect(self.accept)
        if self.substations.count():
            self.substations.setCurrentRow(0)

    def chosen(self) -> list[str]:
        """The ticked substations, in list order."""
        out = []
        for r in range(self.substations.count()):
            item = self.substations.item(r)
            if item.checkState() == Qt.Checked:
                out.append(item.data(Qt.UserRole))
        return out

    def _on_current_changed(self, item: QListWidgetItem | None, _previous) -> None:
        if item is not None:
            self.preview.setHtml(self.pages[item.data(Qt.UserRole)])

    def _ask_path(self, caption: str, name: str, pattern: str) -> Path | None:
        start = str((self.site.path or Path.home()) / name)
        path, _ = QFileDialog.getSaveFileName(self, caption, start, pattern)
        return Path(path) if path else None

    def _nothing_chosen(self) -> bool:
        if self.chosen():
            return False
        self.status.setText("Tick at least one substation.")
        return True

    def save_pdf(self, path: Path | None = None) -> Path | None:
        """The chosen checklists as one PDF (asks where when ``path`` is None)."""
        if self._nothing_chosen():
            return None
        path = path or self._ask_path("Save work orders as PDF", "work_orders.pdf",
                                      "PDF (*.pdf)")
        if path is None:
            return None
        try:
            sheets_to_pdf([self.sheets[s] for s in self.chosen()], path,
                          title=f"{self.site.name}: field checks", footer=self.site.name)
        except OSError as exc:
            QMessageBox.warning(self, "Work orders", f"Could not write {path}: {exc}")
            return None
        self.status.setText(f"Saved {path}")
        return path

    def export_csv(self, path: Path | None = None) -> Path | None:
        """The chosen substations' checks as a CSV (asks where when ``path`` is None)."""
        if self._nothing_chosen():
            return None
        path = path or self._ask_path("Export work orders as CSV", "work_orders.csv",
                                      "CSV (*.csv)")
        if path is None:
            return None
        chosen = self.findings[self.findings["substation"].astype(str).str.strip()
                               .isin(self.chosen())]
        try:
            write_work_orders_csv(chosen, self.site.points, path, site_name=self.site.name)
        except OSError as exc:
            QMessageBox.warning(self, "Work orders", f"Could not write {path}: {exc}")
            return None
        self.status.setText(f"Exported {path}")
        return path

    def document(self) -> QTextDocument:
        """The chosen checklists as one document, each substation starting a new sheet."""
        pages = [self.pages[s] for s in self.chosen()]
        body = "".join(f'<div style="page-break-before: always">{p}</div>' if i else p
                       for i, p in enumerate(pages))
        doc = QTextDocument(self)
        doc.setHtml(body)
        return doc

    def print_pages(self) -> bool:
        """Print the chosen checklists on a printer the user picks."""
        if self._nothing_chosen():
            return False
        from PySide6.QtPrintSupport import QPrintDialog, QPrinter

        printer = QPrinter(QPrinter.HighResolution)
        dialog = QPrintDialog(printer, self)
        if dialog.exec() != QDialog.Accepted:
            return False
        paint_sheets(printer, [self.sheets[s] for s in self.chosen()], self.site.name)
        self.status.setText(f"Sent {len(self.chosen())} checklist(s) to {printer.printerName()}")
        return True
