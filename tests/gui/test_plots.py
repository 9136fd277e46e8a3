"""The point plots: keys beside the data, empty plots cleared, the quantity a mismapped point
reads, and the lanes of snapshots without a value or an estimate."""

from __future__ import annotations

import copy

import numpy as np
from PySide6.QtCore import QPoint, QRect

from calibra.gui.point_trace import point_trace
from calibra.gui.qt_plots import PlotPanel
from tests.gui.conftest import MISMAPPED_TAGS, REVERSED_TAGS


def _global_rect(widget) -> QRect:
    return QRect(widget.mapToGlobal(QPoint(0, 0)), widget.size())


def _data_rect(plot) -> QRect:
    """Where a plot draws its data (its view box), in global coordinates."""
    box = plot.getPlotItem().getViewBox().sceneBoundingRect()
    top_left = plot.mapToGlobal(plot.mapFromScene(box.topLeft()))
    bottom_right = plot.mapToGlobal(plot.mapFromScene(box.bottomRight()))
    return QRect(top_left, bottom_right)


def _panel(qtbot) -> PlotPanel:
    panel = PlotPanel()
    qtbot.addWidget(panel)
    panel.resize(900, 800)
    panel.show()
    return panel


def _no_implied_tag(run) -> str:
    ev = run.result.evidence
    empty = ~np.isfinite(ev.implied).any(axis=0)
    assert empty.any(), "the small site has a point nothing checks"
    return str(ev.model.tags[np.flatnonzero(empty)[0]])


def test_keys_sit_outside_the_data(qtbot, reviewed):
    site, run = reviewed
    panel = _panel(qtbot)
    panel.show_trace(point_trace(site, run.result, REVERSED_TAGS[0]), REVERSED_TAGS[0])
    qtbot.wait(50)
    for key, plot in ((panel.series_key, panel.series), (panel.residual_key, panel.residual),
                      (panel.scatter_key, panel.scatter)):
        assert key.entries and key.isVisible()
        assert not _global_rect(key).intersects(_data_rect(plot))
    words = " ".join(w for _, w in panel.residual_key.entries)
    assert "× implied" in words  # the fitted reversal is named in the residual's key


def test_point_without_implied_values_clears_the_scatter(qtbot, reviewed):
    site, run = reviewed
    panel = _panel(qtbot)
    panel.show_trace(point_trace(site, run.result, REVERSED_TAGS[0]), "a reversed point")
    qtbot.wait(20)
    before = panel.scatter.getPlotItem().getViewBox().viewRange()
    assert panel.curves["scatter"].data.size > 0
    tag = _no_implied_tag(run)
    panel.show_trace(point_trace(site, run.result, tag), "a point nothing checks")
    qtbot.wait(20)
    after = panel.scatter.getPlotItem().getViewBox().viewRange()
    assert panel.curves["scatter"].data.size == 0
    assert after != before
    assert np.allclose(after, [[-1, 1], [-1, 1]])
    assert panel.scatter_note.toPlainText()
    panel.show_trace(None, "nothing selected")
    assert panel.curves["measured"].yData is None or panel.curves["measured"].yData.size == 0
    assert not panel.series_key.entries


def test_mismapped_point_is_plotted_against_what_it_reads(qtbot, mismapped_reviewed):
    site, run = mismapped_reviewed
    mw, mvar = MISMAPPED_TAGS
    assert f"{mw}|mismapped" in set(run.findings["finding_id"])
    trace = point_trace(site, run.result, mw)
    assert trace.followed is not None and "reactive-power flow" in trace.followed_label
    # Ground truth: the simulator wrote the reactive flow into the MW input, and the MVAR
    # point's implied value is that reactive flow.
    ev = run.result.evidence
    q_implied = ev.implied[:, ev.model.tags.get_loc(mvar)].astype(float)
    ok = np.isfinite(q_implied) & np.isfinite(trace.followed)
    assert ok.sum() > 500
    assert np.median(np.abs(trace.followed[ok] - q_implied[ok])) < 0.2
    panel = _panel(qtbot)
    panel.show_trace(trace, mw)
    x, y = panel.curves["scatter"].getData()
    # The scatter sets the point against the quantity it follows: close to the diagonal.
    assert x.size > 100 and np.median(np.abs(y - x)) < 0.5
    assert "reads instead" in panel.scatter.getAxis("bottom").labelText
    assert np.array_equal(panel.curves["followed"].yData, trace.followed, equal_nan=True)
    assert any("reactive-power flow" in w for _, w in panel.series_key.entries)


def test_no_estimate_lane_marks_only_snapshots_without_an_estimate(qtbot, reviewed):
    site, run = reviewed
    tag = REVERSED_TAGS[0]
    trace = point_trace(site, run.result, tag)
    assert not trace.not_estimated.any()  # every snapshot of the small site is estimated
    panel = _panel(qtbot)
    panel.show_trace(trace, tag)
    x, _ = panel.curves["strip_unestimated"].getData()
    assert x is None or x.size == 0
    assert "no estimate: none" in [w for _, w in panel.strip_key.entries]
    # Take the estimate of the point's buses away in 30 snapshots: exactly those are marked.
    result = copy.copy(run.result)
    ev = copy.copy(result.evidence)
    ev.period = copy.copy(ev.period)
    ev.period.vm = ev.period.vm.copy()
    i = int(ev.model.tags.get_loc(tag))
    gone = np.arange(100, 130)
    ev.period.vm[np.ix_(gone, ev.model.functions.buses_of(i))] = np.nan
    result.evidence = ev
    trace = point_trace(site, result, tag)
    assert np.array_equal(np.flatnonzero(trace.not_estimated), gone)
    panel.show_trace(trace, tag)
    x, _ = panel.curves["strip_unestimated"].getData()
    assert x.size == 2 and x[0] < trace.x[100] and x[1] > trace.x[129]
    assert "no estimate: 30 snapshots (0.5 h)" in [w for _, w in panel.strip_key.entries]
