"""Every column of the list and the side tables shows its whole content at the window's size."""

from __future__ import annotations

from PySide6.QtCore import QRect, Qt
from PySide6.QtWidgets import QTableWidget

from tests.gui.conftest import REVERSED_TAGS, open_and_wait, review_and_wait

REASON = ("the field crew measured the secondary current with a clamp meter and found the "
          "polarity as drawn on the schematic, so the sign comes from the RTU configuration")


def _assert_table_fits(table: QTableWidget) -> None:
    assert table.rowCount() > 0
    header = table.horizontalHeader()
    assert header.length() <= table.viewport().width() + 1  # nothing cut at the right
    for c in range(table.columnCount()):
        if c == table.wrap:
            continue
        assert table.columnWidth(c) >= table.sizeHintForColumn(c)
        assert table.columnWidth(c) >= header.sectionSizeHint(c)
    metrics = table.fontMetrics()
    width = table.columnWidth(table.wrap) - 8
    for r in range(table.rowCount()):
        text = table.item(r, table.wrap).text()
        needed = metrics.boundingRect(QRect(0, 0, width, 10_000), Qt.TextWordWrap, text)
        assert table.rowHeight(r) >= needed.height()


def test_list_and_tables_show_whole_content(qtbot, window, site_folder):
    open_and_wait(qtbot, window, site_folder)
    review_and_wait(qtbot, window)
    tree = window.findings.tree
    header = tree.header()
    for c in range(header.count()):
        assert header.sectionSize(c) >= tree.sizeHintForColumn(c)
    assert header.length() <= tree.viewport().width()  # the Fitted column is not cut
    assert window.findings.select(f"{REVERSED_TAGS[0]}|reversed")
    assert window.point_actions.dismiss(REASON)
    window.details.setCurrentWidget(window.details.history)
    qtbot.wait(50)
    _assert_table_fits(window.details.history)
    assert any(REASON in window.details.history.item(r, 2).text()
               for r in range(window.details.history.rowCount()))
    review_and_wait(qtbot, window)
    window.details.setCurrentIndex(3)
    qtbot.wait(50)
    _assert_table_fits(window.details.compare)
