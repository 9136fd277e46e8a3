"""The neighbourhood diagram: the selected point's substation, its neighbours and the meters.

Drawn on a ``QGraphicsScene`` from a :class:`~calibra.gui.diagram_layout.Diagram`: substations
as soft boxes, buses as bars, branches as lines (open ones dashed, transformers with two
rings), one small square per device and place. The selected point's meter is ringed; meters
with open findings are coloured. Names are placed where no meter square, bus bar or other name
is. Wheel zooms, dragging pans, double-clicking shows the whole diagram again, clicking a meter
selects its first point; hovering a branch names it with its flows as estimated.
"""

from __future__ import annotations

import numpy as np
from PySide6.QtCore import QPointF, QRectF, Qt, Signal
from PySide6.QtGui import QBrush, QColor, QFont, QPainter, QPen
from PySide6.QtWidgets import (
    QGraphicsEllipseItem,
    QGraphicsLineItem,
    QGraphicsRectItem,
    QGraphicsScene,
    QGraphicsSimpleTextItem,
    QGraphicsView,
    QLabel,
    QVBoxLayout,
    QWidget,
)

from calibra.diagnosis.review import ReviewResult
from calibra.gui.branch_flows import branch_flow_texts
from calibra.gui.diagram_layout import BOX_PAD, Diagram, lane_offset, substation_diagram
from calibra.gui.qt_style import COLOURS, SUBSTATION_FILLS
from calibra.model.site import Site

SCALE = 340.0  #: scene units per unit-box unit
METER = 9.0
ZOOM_STEP = 1.15  #: one wheel notch
MAX_ZOOM = 12.0  #: view pixels per scene unit at most


class _MeterItem(QGraphicsRectItem):
    """A meter square that reports clicks."""

    def __init__(self, view: DiagramView, tags: list[str], rect: QRectF):
        super().__init__(rect)
        self._view = view
        self.tags = tags
        self.setAcceptedMouseButtons(Qt.LeftButton)
        self.setCursor(Qt.PointingHandCursor)

    def mousePressEvent(self, event) -> None:  # noqa: N802 (Qt API)
        self._view.meterClicked.emit(self.tags[0])
        event.accept()


class DiagramView(QGraphicsView):
    """Zoomable view of one substation diagram."""

    meterClicked = Signal(str)

    def __init__(self, parent: QWidget | None = None):
        super().__init__(parent)
        self.setScene(QGraphicsScene(self))
        self.setRenderHint(QPainter.Antialiasing)
        self.setDragMode(QGraphicsView.ScrollHandDrag)
        self.setTransformationAnchor(QGraphicsView.AnchorUnderMouse)
        self.setBackgroundBrush(QBrush(QColor(COLOURS["plot_bg"])))
        # No scroll bars: dragging pans. (Scroll bars appearing on a zoom resized the view,
        # and the resize fitted the whole diagram again, so the wheel seemed to do nothing.)
        self.setHorizontalScrollBarPolicy(Qt.ScrollBarAlwaysOff)
        self.setVerticalScrollBarPolicy(Qt.ScrollBarAlwaysOff)
        self.diagram: Diagram | None = None
        self.meter_items: dict[str, _MeterItem] = {}
        self.labels: list[QGraphicsSimpleTextItem] = []
        self.branch_items: dict[str, QGraphicsLineItem] = {}
        self.flows: dict[str, str] = {}
        self.selected_tag: str | None = None
        self.auto_fit = True  #: fit the whole diagram on resizes until the user zooms

    def wheelEvent(self, event) -> None:  # noqa: N802 (Qt API)
        factor = ZOOM_STEP ** (event.angleDelta().y() / 120.0)  # one notch is 120
        zoom = self.transform().m11() * factor
        if self._fit_zoom() / 2 <= zoom <= MAX_ZOOM:
            self.auto_fit = False
            self.scale(factor, factor)
        event.accept()

    def mouseDoubleClickEvent(self, event) -> None:  # noqa: N802 (Qt API)
        self.auto_fit = True
        self.fit()

    def _fit_zoom(self) -> float:
        rect = self.scene().itemsBoundingRect()
        if rect.isEmpty():
            return 1.0
        view = self.viewport().rect()
        return min(view.width() / rect.width(), view.height() / rect.height())

    def fit(self) -> None:
        rect = self.scene().itemsBoundingRect().adjusted(-10, -10, 10, 10)
        self.setSceneRect(rect.adjusted(-rect.width(), -rect.height(), rect.width(),
                                        rect.height()))  # room to pan when zoomed in
        self.fitInView(rect, Qt.KeepAspectRatio)

    def resizeEvent(self, event) -> None:  # noqa: N802 (Qt API)
        super().resizeEvent(event)
        if self.diagram is not None and self.auto_fit:
            self.fit()

    def set_flows(self, flows: dict[str, str]) -> None:
        """Estimated flows per branch, shown when a branch is hovered."""
        self.flows = dict(flows)
        for branch, item in self.branch_items.items():
            item.setToolTip(self._branch_tip(branch))

    def _branch_tip(self, branch: str) -> str:
        line = next((ln for ln in self.diagram.branches if ln.branch == branch), None)
        if line is None:
            return branch
        d = self.diagram
        head = (f"{'transformer' if line.kind == 'transformer' else 'branch'} {branch}: "
                f"{d.buses[line.a]} → {d.buses[line.b]}"
                + ("" if line.in_service else " (open)"))
        flow = self.flows.get(branch)
        return head + ("\n" + flow if flow else "\nflows: run the review to see them")

    def draw(self, diagram: Diagram, focus: set[str]) -> None:
        """Draw ``diagram``; substations in ``focus`` (under commissioning) get a note."""
        scene = self.scene()
        scene.clear()
        self.meter_items = {}
        self.labels = []
        self.branch_items = {}
        self.diagram = diagram
        self.auto_fit = True
        boxes: list[tuple[QRectF, str]] = []
        pos = diagram.positions * SCALE
        small = QFont()
        small.setPointSizeF(7.0)
        bold = QFont(small)
        bold.setBold(True)
        for j, sub in enumerate(dict.fromkeys(diagram.substation_of)):
            members = pos[[i for i, s in enumerate(diagram.substation_of) if s == sub]]
            lo, hi = members.min(axis=0), members.max(axis=0)
            rect = QRectF(QPointF(*(lo - BOX_PAD * SCALE)), QPointF(*(hi + BOX_PAD * SCALE)))
            own = sub == diagram.substation
            box = scene.addRect(rect, QPen(QColor(COLOURS["focus"] if own else "#c9ced2"),
                                           1.6 if own else 0.8),
                                QBrush(QColor(SUBSTATION_FILLS[j % len(SUBSTATION_FILLS)])))
            box.setZValue(-5)
            boxes.append((rect, sub + ("  · commissioning" if sub in focus else "")))
        for line in diagram.branches:
            shift = lane_offset(diagram.positions[line.a], diagram.positions[line.b],
                                line.lane) * SCALE
            p, q = pos[line.a] + shift, pos[line.b] + shift
            colour = COLOURS["branch"] if line.in_service else COLOURS["branch_open"]
            pen = QPen(QColor(colour), 1.6, Qt.SolidLine if line.in_service else Qt.DashLine)
            item = scene.addLine(p[0], p[1], q[0], q[1], pen)
            item.setZValue(-2)
            self.branch_items[line.branch] = item
            if line.kind == "transformer":
                mid, d = (p + q) / 2, (q - p) / max(float(np.linalg.norm(q - p)), 1e-9)
                for k in (-3.0, 3.0):
                    c = mid + d * k
                    ring = scene.addEllipse(c[0] - 5, c[1] - 5, 10, 10, QPen(QColor(colour), 1.3),
                                            QBrush(QColor(COLOURS["plot_bg"])))
                    ring.setZValue(-1)
        obstacles: list[QRectF] = []
        for i, bus in enumerate(diagram.buses):
            bar = scene.addRect(pos[i][0] - 16, pos[i][1] - 3, 32, 6, QPen(Qt.NoPen),
                                QBrush(QColor(COLOURS["bus"])))
            bar.setToolTip(bus)
            obstacles.append(bar.sceneBoundingRect())
        for mark in diagram.meters:
            rect = QRectF(mark.x * SCALE - METER / 2, mark.y * SCALE - METER / 2, METER, METER)
            item = _MeterItem(self, mark.tags, rect)
            item.setToolTip(f"{mark.device}\n" + "\n".join(mark.tags))
            item.setZValue(2)
            scene.addItem(item)
            for tag in mark.tags:
                self.meter_items[tag] = item
            obstacles.append(item.sceneBoundingRect().adjusted(-1, -1, 1, 1))
        for rect, text in boxes:
            label = scene.addSimpleText(text, bold)
            w, h = label.boundingRect().width(), label.boundingRect().height()
            _place(label, [QPointF(rect.left() + 4, rect.top() + 2),
                           QPointF(rect.right() - w - 4, rect.top() + 2),
                           QPointF(rect.left(), rect.top() - h - 1),
                           QPointF(rect.left() + 4, rect.bottom() - h - 2),
                           QPointF(rect.left(), rect.bottom() + 1)], obstacles)
            self.labels.append(label)
        for i, bus in enumerate(diagram.buses):
            label = scene.addSimpleText(bus, small)
            label.setToolTip(bus)
            _place(label, _around(pos[i], label.boundingRect()), obstacles)
            self.labels.append(label)
        for branch, item in self.branch_items.items():
            item.setToolTip(self._branch_tip(branch))
        self.fit()

    def highlight(self, selected: str | None, flagged: set[str]) -> None:
        """Colour meters: the selected point's ringed, those with open findings marked."""
        self.selected_tag = selected
        for item in set(self.meter_items.values()):
            is_selected = selected in item.tags
            is_flagged = bool(flagged.intersection(item.tags))
            fill = COLOURS["flagged"] if is_flagged else COLOURS["meter"]
            if is_selected:
                fill = COLOURS["selected"]
            item.setBrush(QBrush(QColor(fill)))
            item.setPen(QPen(QColor(COLOURS["selected"] if is_selected else COLOURS["bus"]),
                             2.4 if is_selected else 0.6))
            item.setZValue(4 if is_selected else 2)
        scene = self.scene()
        for old in [i for i in scene.items() if isinstance(i, QGraphicsEllipseItem)
                    and i.data(0) == "halo"]:
            scene.removeItem(old)
        item = self.meter_items.get(selected or "")
        if item is not None:
            c = item.rect().center()
            halo = scene.addEllipse(c.x() - 11, c.y() - 11, 22, 22,
                                    QPen(QColor(COLOURS["selected"]), 1.4), QBrush(Qt.NoBrush))
            halo.setData(0, "halo")
            halo.setZValue(3)


class DiagramPanel(QWidget):
    """The diagram with a one-line key; keeps one layout per substation."""

    def __init__(self, parent: QWidget | None = None):
        super().__init__(parent)
        self.view = DiagramView(self)
        key = QLabel(
            f'<span style="color:{COLOURS["selected"]}">■</span> selected point&nbsp;&nbsp;'
            f'<span style="color:{COLOURS["flagged"]}">■</span> open finding&nbsp;&nbsp;'
            f'<span style="color:{COLOURS["meter"]}">■</span> other meters&nbsp;&nbsp;'
            "dashed: open branch&nbsp;&nbsp;<i>wheel: zoom · drag: pan · double-click: "
            "all</i>", self)
        key.setWordWrap(True)
        key.setObjectName("diagramKey")
        self.caption = QLabel("", self)
        self.caption.setObjectName("sectionTitle")
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addWidget(self.caption)
        layout.addWidget(self.view, 1)
        layout.addWidget(key)
        self._site: Site | None = None
        self._focus: set[str] = set()
        self._cache: dict[str, Diagram] = {}
        self._result: ReviewResult | None = None

    def set_result(self, result: ReviewResult | None) -> None:
        """The latest review: its estimates give the flows shown on hover."""
        self._result = result
        self._show_flows()

    def _show_flows(self) -> None:
        diagram = self.view.diagram
        if diagram is None or self._site is None or self._result is None:
            self.view.set_flows({})
            return
        self.view.set_flows(branch_flow_texts(self._site, self._result,
                                              [ln.branch for ln in diagram.branches]))

    def set_site(self, site: Site | None, focus: list[str]) -> None:
        self._site = site
        self._focus = set(focus)
        self._cache = {}
        self._result = None
        self.view.scene().clear()
        self.view.diagram = None
        self.view.meter_items = {}
        self.view.branch_items = {}  # their items went with the scene
        self.caption.setText("")

    def show_point(self, tag: str | None, flagged: set[str]) -> None:
        """Show the substation of ``tag`` with its meter ringed."""
        site = self._site
        if site is None or tag is None or tag not in site.points.index:
            self.view.highlight(None, flagged)
            return
        sub = _substation_of(site, tag)
        if self.view.diagram is None or self.view.diagram.substation != sub:
            if sub not in self._cache:
                self._cache[sub] = substation_diagram(site, sub)
            self.view.draw(self._cache[sub], self._focus)
            self._show_flows()
            self.caption.setText(f"Substation {sub} and its neighbours")
        self.view.highlight(tag, flagged)


def _around(centre: np.ndarray, box: QRectF) -> list[QPointF]:
    """Where a bus's name may go, best first: below, above, right, left of its bar, then
    further out."""
    x, y, w, h = float(centre[0]), float(centre[1]), box.width(), box.height()
    out = []
    for gap in (4.0, 14.0, 26.0):
        out += [QPointF(x - w / 2, y + 3 + gap - 3), QPointF(x - w / 2, y - 3 - gap + 3 - h),
                QPointF(x + 17 + gap - 4, y - h / 2), QPointF(x - 17 - gap + 4 - w, y - h / 2),
                QPointF(x + 10, y + gap), QPointF(x - 10 - w, y - gap - h),
                QPointF(x + 10, y - gap - h), QPointF(x - 10 - w, y + gap)]
    return out


def _place(label: QGraphicsSimpleTextItem, candidates: list[QPointF],
           obstacles: list[QRectF]) -> None:
    """Put ``label`` at the first candidate that covers nothing in ``obstacles`` (else where it
    covers least), and add where it went to the obstacles."""
    best, best_cost = candidates[0], float("inf")
    for at in candidates:
        label.setPos(at)
        rect = label.sceneBoundingRect()
        cost = sum(_area(rect.intersected(o)) for o in obstacles if rect.intersects(o))
        if cost < best_cost:
            best, best_cost = at, cost
        if cost == 0:
            break
    label.setPos(best)
    obstacles.append(label.sceneBoundingRect().adjusted(-1, -1, 1, 1))


def _area(rect: QRectF) -> float:
    return max(rect.width(), 0.0) * max(rect.height(), 0.0)


def _substation_of(site: Site, tag: str) -> str:
    """The substation where the point's element is (the network decides, not the label)."""
    pt = site.points.loc[tag]
    net = site.network
    element, end = str(pt["element"]), str(pt.get("end", "") or "")
    if element in net.branches.index:
        bus = net.branches.at[element, "to_bus" if end == "to" else "from_bus"]
        return str(net.buses.at[bus, "substation"])
    if element in net.buses.index:
        return str(net.buses.at[element, "substation"])
    return str(pt["substation"])
