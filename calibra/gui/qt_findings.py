"""The findings list: filters above a tree grouped by substation and device.

The panel observes the session state (:class:`~calibra.gui.session_state.SessionState`): the
tree is rebuilt from its :class:`~calibra.gui.findings_view.FindingsView` whenever the data or
the filter changes (a week's findings are a few dozen rows); the filter widgets change the
state's filter. Clicking a column header sorts within each group. Substations under
commissioning are listed first and marked.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from PySide6.QtCore import QItemSelectionModel, QModelIndex, Qt, Signal
from PySide6.QtGui import QColor, QStandardItem, QStandardItemModel
from PySide6.QtWidgets import (
    QAbstractItemView,
    QCheckBox,
    QComboBox,
    QDoubleSpinBox,
    QGridLayout,
    QHeaderView,
    QLabel,
    QLineEdit,
    QToolButton,
    QTreeView,
    QVBoxLayout,
    QWidget,
)

from calibra.diagnosis.findings import FINDING_KINDS
from calibra.gui.findings_view import FindingFilter, FindingsView, confidence_text, neighbour
from calibra.gui.qt_style import COLOURS, state_dot
from calibra.gui.session_state import Change, SessionState
from calibra.ledger import STATES

ID_ROLE = Qt.UserRole + 1
TAG_ROLE = Qt.UserRole + 2
SORT_ROLE = Qt.UserRole + 3
COLUMNS = ("Point", "Finding", "Conf.", "State", "Fitted")
ALL = "all"


def fitted_text(row: pd.Series) -> str:
    """The finding's fitted value in a few characters."""
    for name, fmt in (("factor", "× {:.3f}"), ("offset", "{:+.3g}"), ("drift_per_day",
                                                                      "{:+.3g}/day")):
        value = row.get(name)
        if value is not None and not pd.isna(value):
            return fmt.format(float(value))
    return ""


class FindingsPanel(QWidget):
    """Filter bar and grouped tree; emits ``findingSelected(finding_id, tag)``."""

    findingSelected = Signal(str, str)

    def __init__(self, session: SessionState, parent: QWidget | None = None):
        super().__init__(parent)
        self.session = session
        self.search = QLineEdit(self)
        self.search.setPlaceholderText("Search tags…")
        self.search.setClearButtonEnabled(True)
        self.substation = QComboBox(self)
        self.kind = QComboBox(self)
        self.kind.addItem("every kind", "")
        for kind in FINDING_KINDS:
            self.kind.addItem(kind.value, kind.value)
        self.state = QComboBox(self)
        self.state.addItem("every state", "")
        for state in STATES:
            self.state.addItem(state.value, state.value)
        self.confidence = QDoubleSpinBox(self)
        self.confidence.setRange(0.0, 1.0)
        self.confidence.setSingleStep(0.05)
        self.confidence.setDecimals(2)
        self.confidence.setPrefix("confidence ≥ ")
        self.earlier = QCheckBox("earlier findings", self)
        self.earlier.setToolTip("Also list ledger findings that the latest review did not find "
                                "again (for example points corrected in software)")
        self.focus = QToolButton(self)
        self.focus.setCheckable(True)
        self.focus.setText("New substation")
        self.focus.setToolTip("Show only the points of the substation being commissioned")
        self.count = QLabel("", self)
        self.tree = QTreeView(self)
        self.model = QStandardItemModel(0, len(COLUMNS), self)
        self.model.setHorizontalHeaderLabels(list(COLUMNS))
        self.model.setSortRole(SORT_ROLE)
        self.tree.setModel(self.model)
        self.tree.setSelectionMode(QAbstractItemView.SingleSelection)
        self.tree.setEditTriggers(QAbstractItemView.NoEditTriggers)
        self.tree.setUniformRowHeights(True)
        self.tree.setIndentation(12)
        self.tree.setSortingEnabled(True)
        self.tree.header().setSortIndicator(-1, Qt.AscendingOrder)
        self.tree.header().setStretchLastSection(False)
        for col in range(len(COLUMNS)):
            self.tree.header().setSectionResizeMode(col, QHeaderView.ResizeToContents)

        grid = QGridLayout()
        grid.setContentsMargins(0, 0, 0, 0)
        grid.addWidget(self.search, 0, 0, 1, 2)
        grid.addWidget(self.focus, 0, 2)
        grid.addWidget(self.substation, 1, 0)
        grid.addWidget(self.kind, 1, 1)
        grid.addWidget(self.state, 1, 2)
        grid.addWidget(self.confidence, 2, 0)
        grid.addWidget(self.earlier, 2, 1)
        grid.addWidget(self.count, 2, 2)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(4, 4, 4, 4)
        layout.addLayout(grid)
        layout.addWidget(self.tree, 1)

        self.search.textChanged.connect(self._on_filter_changed)
        for combo in (self.substation, self.kind, self.state):
            combo.currentIndexChanged.connect(self._on_filter_changed)
        self.confidence.valueChanged.connect(self._on_filter_changed)
        self.earlier.toggled.connect(self._on_filter_changed)
        self.focus.toggled.connect(self._on_focus_toggled)
        self.tree.selectionModel().currentChanged.connect(self._on_current_changed)
        self._updating = False
        self.refresh()
        session.changed.connect(self._on_state_changed)

    @property
    def view(self) -> FindingsView:
        """The findings of the session, with their filter."""
        return self.session.view

    def _on_state_changed(self, change: Change) -> None:
        if change in (Change.SITE, Change.REVIEW):
            self.refresh_choices()
            self.refresh()
        elif change in (Change.LEDGER, Change.FILTER):
            self.refresh()

    # ---- filters ------------------------------------------------------------------------
    def refresh_choices(self) -> None:
        """Refill the substation drop-down from the data (keeps the current choice)."""
        current = self.substation.currentData()
        self.substation.blockSignals(True)
        self.substation.clear()
        self.substation.addItem("every substation", ALL)
        for sub in self.view.choices("substation"):
            mark = " · commissioning" if sub in self.view.focus else ""
            self.substation.addItem(sub + mark, sub)
        at = self.substation.findData(current)
        self.substation.setCurrentIndex(max(at, 0))
        self.substation.blockSignals(False)
        self.focus.setEnabled(bool(self.view.focus))
        self.focus.setText("New substation: " + ", ".join(self.view.focus)
                           if self.view.focus else "New substation")

    def _on_focus_toggled(self, on: bool) -> None:
        if on:
            self.substation.blockSignals(True)
            self.substation.setCurrentIndex(0)
            self.substation.blockSignals(False)
        self._on_filter_changed()

    def _on_filter_changed(self, *_args) -> None:
        sub = self.substation.currentData()
        if sub not in (None, ALL) and self.focus.isChecked():
            self.focus.blockSignals(True)
            self.focus.setChecked(False)
            self.focus.blockSignals(False)
        subs = frozenset(self.view.focus) if self.focus.isChecked() else (
            frozenset() if sub in (None, ALL) else frozenset([sub]))
        self.session.set_filter(FindingFilter(
            substations=subs, kind=self.kind.currentData() or "",
            state=self.state.currentData() or "", min_confidence=self.confidence.value(),
            search=self.search.text(), include_earlier=self.earlier.isChecked()))

    # ---- tree ---------------------------------------------------------------------------
    def refresh(self) -> None:
        """Rebuild the tree from the view, keeping the selected finding selected."""
        keep = self.current_id()
        self._updating = True
        self.model.removeRows(0, self.model.rowCount())
        root = self.model.invisibleRootItem()
        shown = 0
        for sub, devices in self.view.groups():
            n = sum(len(rows) for _, rows in devices)
            shown += n
            mark = " · commissioning" if sub in self.view.focus else ""
            sub_item = _group_item(f"{sub}{mark}  ({n})", sub)
            if mark:
                sub_item.setForeground(QColor(COLOURS["focus"]))
            sub_row = [sub_item] + [_group_item("", "") for _ in COLUMNS[1:]]
            root.appendRow(sub_row)
            for device, rows in devices:
                dev_row = [_group_item(device, device)] + [_group_item("", "")
                                                            for _ in COLUMNS[1:]]
                sub_item.appendRow(dev_row)
                for _, row in rows.iterrows():
                    dev_row[0].appendRow(_finding_items(row))
        total = len(self.view.table())
        self.count.setText(f"{shown} of {total} shown")
        self.tree.expandAll()
        self._fit_columns()
        self._updating = False
        if keep is not None:
            self.select(keep, emit=False)

    def _fit_columns(self) -> None:
        """Keep the tree at least as wide as its columns, so no column is cut off."""
        header = self.tree.header()
        header.resizeSections(QHeaderView.ResizeToContents)
        needed = (header.length() + self.tree.verticalScrollBar().sizeHint().width()
                  + 2 * self.tree.frameWidth() + 2)
        self.tree.setMinimumWidth(needed)

    def leaf_ids(self) -> list[str]:
        """Finding ids in the order the tree shows them."""
        out = []

        def walk(parent: QModelIndex) -> None:
            for r in range(self.model.rowCount(parent)):
                index = self.model.index(r, 0, parent)
                fid = index.data(ID_ROLE)
                if fid:
                    out.append(fid)
                walk(index)

        walk(QModelIndex())
        return out

    def current_id(self) -> str | None:
        index = self.tree.currentIndex()
        if not index.isValid():
            return None
        return index.siblingAtColumn(0).data(ID_ROLE)

    def select(self, finding_id: str, emit: bool = True) -> bool:
        """Select a finding by id; False when it is not listed."""
        index = self._find(finding_id)
        if index is None:
            return False
        self._updating = not emit
        self.tree.selectionModel().setCurrentIndex(
            index, QItemSelectionModel.ClearAndSelect | QItemSelectionModel.Rows)
        self.tree.scrollTo(index)
        self._updating = False
        return True

    def step(self, step: int) -> str | None:
        """Select the next (``step`` 1) or previous (−1) finding in the tree's order."""
        fid = neighbour(self.leaf_ids(), self.current_id(), step)
        if fid is not None:
            self.select(fid)
        return fid

    def _find(self, finding_id: str) -> QModelIndex | None:
        hits = self.model.match(self.model.index(0, 0), ID_ROLE, finding_id, 1,
                                Qt.MatchExactly | Qt.MatchRecursive)
        return hits[0] if hits else None

    def _on_current_changed(self, current: QModelIndex, _previous: QModelIndex) -> None:
        if self._updating or not current.isValid():
            return
        first = current.siblingAtColumn(0)
        fid, tag = first.data(ID_ROLE), first.data(TAG_ROLE)
        if fid:
            self.findingSelected.emit(fid, tag)


def _group_item(text: str, sort_key: str) -> QStandardItem:
    item = QStandardItem(text)
    item.setData(sort_key, SORT_ROLE)
    font = item.font()
    font.setBold(bool(text))
    item.setFont(font)
    item.setSelectable(False)
    return item


def _finding_items(row: pd.Series) -> list[QStandardItem]:
    conf = float(row["confidence"]) if pd.notna(row["confidence"]) else np.nan
    values = [
        (row["tag"], row["tag"]),
        (row["finding"], row["finding"]),
        (confidence_text(conf), -1.0 if np.isnan(conf) else conf),
        (row["state"] + (" (reopened)" if row.get("reopened") else "")
         + ("" if row["in_review"] else " (earlier)"),
         STATES.index(row["state"]) if row["state"] in STATES else 99),
        (fitted_text(row), row["finding"]),
    ]
    items = []
    for text, key in values:
        item = QStandardItem(str(text))
        item.setData(key, SORT_ROLE)
        item.setData(row["finding_id"], ID_ROLE)
        item.setData(row["tag"], TAG_ROLE)
        item.setToolTip(str(row["evidence"]))
        items.append(item)
    items[3].setIcon(state_dot(row["state"]))
    if not row["in_review"]:
        for item in items:
            item.setForeground(QColor("#8a9096"))
    return items
