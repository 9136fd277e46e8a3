"""The diagram as drawn: zoom and pan, names clear of meters and of each other, substation
boxes apart, branch names and estimated flows on hover."""

from __future__ import annotations

import itertools

import pytest
from PySide6.QtCore import QPoint, QPointF, Qt
from PySide6.QtGui import QWheelEvent
from PySide6.QtWidgets import QApplication, QGraphicsRectItem

from calibra.gui.qt_diagram import DiagramPanel, _MeterItem


@pytest.fixture
def panel(qtbot, reviewed):
    site, run = reviewed
    p = DiagramPanel()
    qtbot.addWidget(p)
    p.resize(430, 380)
    p.show()
    p.set_site(site, [])
    p.set_result(run.result)
    return p


def _show_substation(panel, site, sub: str) -> None:
    tag = next(t for t, pt in site.points.iterrows() if pt["substation"] == sub)
    panel.show_point(tag, set())
    assert panel.view.diagram.substation == sub


def _wheel(view, notches: int) -> None:
    at = QPointF(view.viewport().rect().center())
    event = QWheelEvent(at, QPointF(view.viewport().mapToGlobal(at.toPoint())), QPoint(0, 0),
                        QPoint(0, 120 * notches), Qt.NoButton, Qt.NoModifier, Qt.ScrollUpdate,
                        False)
    QApplication.sendEvent(view.viewport(), event)


@pytest.mark.parametrize("sub", ["QLN", "TLV", "NRC"])
def test_names_are_clear_of_meters_and_each_other(panel, reviewed, sub):
    site, _ = reviewed
    _show_substation(panel, site, sub)
    view = panel.view
    labels = [item.sceneBoundingRect() for item in view.labels]
    assert len(labels) == len(view.diagram.buses) + len(set(view.diagram.substation_of))
    meters = [item.sceneBoundingRect() for item in set(view.meter_items.values())]
    for a, b in itertools.combinations(labels, 2):
        assert not a.intersects(b)
    for label, meter in itertools.product(labels, meters):
        assert not label.intersects(meter)
    boxes = [i.sceneBoundingRect() for i in view.scene().items()
             if type(i) is QGraphicsRectItem and i.zValue() == -5]
    assert len(boxes) == len(set(view.diagram.substation_of))
    for a, b in itertools.combinations(boxes, 2):
        assert not a.intersects(b)
    assert all(isinstance(i, _MeterItem) for i in view.meter_items.values())


def test_wheel_zooms_and_double_click_fits_again(qtbot, panel, reviewed):
    site, _ = reviewed
    _show_substation(panel, site, "QLN")
    view = panel.view
    qtbot.wait(20)
    fitted = view.transform().m11()
    seen = view.mapToScene(view.viewport().rect()).boundingRect()
    _wheel(view, 3)
    qtbot.wait(20)
    assert view.transform().m11() > fitted * 1.3
    zoomed = view.mapToScene(view.viewport().rect()).boundingRect()
    assert zoomed.width() < seen.width() * 0.8
    panel.resize(440, 390)  # a resize keeps the zoom the user chose
    qtbot.wait(20)
    assert view.transform().m11() > fitted * 1.3
    qtbot.mouseDClick(view.viewport(), Qt.LeftButton, pos=QPoint(3, 3))
    assert view.transform().m11() == pytest.approx(view._fit_zoom(), rel=0.1)


def test_branch_hover_names_it_with_its_estimated_flows(panel, reviewed):
    site, run = reviewed
    _show_substation(panel, site, "QLN")
    view = panel.view
    assert view.branch_items
    ev = run.result.evidence
    for branch, item in view.branch_items.items():
        tip = item.toolTip()
        assert branch in tip
        f, t = site.network.branches.loc[branch, ["from_bus", "to_bus"]]
        if site.network.branches.at[branch, "in_service"]:
            assert f"at {f}:" in tip and f"at {t}:" in tip and "MW" in tip
    # Ground truth for one metered branch end: its P meter's implied value in that snapshot.
    pts = site.points
    metered = pts[(pts["quantity"] == "p_flow") & pts["element"].isin(list(view.branch_items))
                  & (pts["end"] == "from")]
    tag = next(t for t in metered.index if t in ev.model.tags)
    branch = metered.at[tag, "element"]
    implied = float(ev.implied[-1, ev.model.tags.get_loc(tag)])
    shown = view.branch_items[branch].toolTip().split("at ")[1]
    assert abs(float(shown.split(":")[1].split("MW")[0]) - implied) < 0.15
