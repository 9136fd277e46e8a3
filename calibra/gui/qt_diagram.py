"""The neighbourhood diagram: the selected point's substation, its neighbours and the meters.

Drawn on a ``QGraphicsScene`` from a :class:`~calibra.gui.diagram_layout.Diagram`: substations
as soft boxes, buses as bars, branches as lines (open ones dashed, transformers with two
rings), one small square per device and place. The selected point's meter is ringed; meters
with open findings are coloured. Wheel zooms, dragging pans, clicking a meter selects its
first point.
"""

from __future__ import annotations

import numpy as np
from PySide6.QtCore import QPointF, QRectF, Qt, Signal
from PySide6.QtGui import QBrush, QColor, QFont, QPainter, QPen
from PySide6.QtWidgets import (
    QGraphicsEllipseItem,
    QGraphicsRectItem,
    QGraphicsScene,
    QGraphicsView,
    QLabel,
    QVBoxLayout,
    QWidget,
)

from calibra.gui.diagram_layout import Diagram, lane_offset, substation_diagram
from calibra.gui.qt_style import COLOURS, SUBSTATION_FILLS
from calibra.model.site import Site

SCALE = 340.0  #: scene units per unit-box unit
METER = 9.0


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
        self.diagram: Diagram | None = None
        self.meter_items: dict[str, _MeterItem] = {}
        self.selected_tag: str | None = None

    def wheelEvent(self, event) -> None:  # noqa: N802 (Qt API)
        factor = 1.15 if event.angleDelta().y() > 0 else 1 / 1.15
        self.scale(factor, factor)

    def fit(self) -> None:
        rect = self.scene().itemsBoundingRect().adjusted(-10, -10, 10, 10)
        self.fitInView(rect, Qt.KeepAspectRatio)

    def resizeEvent(self, event) -> None:  # noqa: N802 (Qt API)
        super().resizeEvent(event)
        if self.diagram is not None:
            self.fit()

    def draw(self, diagram: Diagram, focus: set[str]) -> None:
        """Draw ``diagram``; substations in ``focus`` (under commissioning) get a note."""
        scene = self.scene()
        scene.clear()
        self.meter_items = {}
        self.diagram = diagram
        pos = diagram.positions * SCALE
        small = QFont()
        small.setPointSizeF(7.0)
        bold = QFont(small)
        bold.setBold(True)
        for j, sub in enumerate(dict.fromkeys(diagram.substation_of)):
            members = pos[[i for i, s in enumerate(diagram.substation_of) if s == sub]]
            lo, hi = members.min(axis=0), members.max(axis=0)
            rect = QRectF(QPointF(*(lo - 34)), QPointF(*(hi + 30)))
            own = sub == diagram.substation
            box = scene.addRect(rect, QPen(QColor(COLOURS["focus"] if own else "#c9ced2"),
                                           1.6 if own else 0.8),
                                QBrush(QColor(SUBSTATION_FILLS[j % len(SUBSTATION_FILLS)])))
            box.setZValue(-5)
            label = sub + ("  · commissioning" if sub in focus else "")
            text = scene.addSimpleText(label, bold)
            text.setPos(rect.left() + 4, rect.top() + 2)
        for line in diagram.branches:
            shift = lane_offset(diagram.positions[line.a], diagram.positions[line.b],
                                line.lane) * SCALE
            p, q = pos[line.a] + shift, pos[line.b] + shift
            colour = COLOURS["branch"] if line.in_service else COLOURS["branch_open"]
            pen = QPen(QColor(colour), 1.6, Qt.SolidLine if line.in_service else Qt.DashLine)
            item = scene.addLine(p[0], p[1], q[0], q[1], pen)
            item.setToolTip(f"{line.branch} ({line.kind})")
            item.setZValue(-2)
            if line.kind == "transformer":
                mid, d = (p + q) / 2, (q - p) / max(float(np.linalg.norm(q - p)), 1e-9)
                for k in (-3.0, 3.0):
                    c = mid + d * k
                    ring = scene.addEllipse(c[0] - 5, c[1] - 5, 10, 10, QPen(QColor(colour), 1.3),
                                            QBrush(QColor(COLOURS["plot_bg"])))
                    ring.setZValue(-1)
        for i, bus in enumerate(diagram.buses):
            bar = scene.addRect(pos[i][0] - 16, pos[i][1] - 3, 32, 6, QPen(Qt.NoPen),
                                QBrush(QColor(COLOURS["bus"])))
            bar.setToolTip(bus)
            text = scene.addSimpleText(bus, small)
            text.setPos(pos[i][0] - text.boundingRect().width() / 2, pos[i][1] + 5)
        for mark in diagram.meters:
            rect = QRectF(mark.x * SCALE - METER / 2, mark.y * SCALE - METER / 2, METER, METER)
            item = _MeterItem(self, mark.tags, rect)
            item.setToolTip(f"{mark.device}\n" + "\n".join(mark.tags))
            item.setZValue(2)
            scene.addItem(item)
            for tag in mark.tags:
                self.meter_items[tag] = item
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
            "dashed: open branch", self)
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

    def set_site(self, site: Site | None, focus: list[str]) -> None:
        self._site = site
        self._focus = set(focus)
        self._cache = {}
        self.view.scene().clear()
        self.view.diagram = None
        self.view.meter_items = {}
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
            self.caption.setText(f"Substation {sub} and its neighbours")
        self.view.highlight(tag, flagged)


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
