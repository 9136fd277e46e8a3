"""The selected point's week in three linked plots and a scatter.

- the time series of measured against implied (and the raw values when a software correction
  changed them), with a strip below marking missing values, the branch being open and
  snapshots the network could not estimate;
- the residual (measured − implied) with the accuracy band and the fitted error model;
- measured against implied, with the ±1 reference lines and the fitted line.

Plot items are made once and refilled with ``setData``; long series are drawn peak-downsampled
and clipped to the view, so moving through the list stays quick. Mouse: drag to pan, wheel to
zoom (the time plots zoom together).
"""

from __future__ import annotations

import math

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt
from PySide6.QtWidgets import QLabel, QSizePolicy, QSplitter, QVBoxLayout, QWidget

from calibra.gui.point_trace import PointTrace
from calibra.gui.qt_plot_keys import PlotKey, span_text
from calibra.gui.qt_style import COLOURS

STRIP_ROWS = ("no value", "branch open", "no estimate")
STRIP_KEYS = ("missing", "open", "unestimated")
STRIP_HELP = (
    "Lanes mark snapshots where the point cannot be compared with the network:\n"
    "no value: no value of the point reached the historian;\n"
    "branch open: the point's branch was out of service;\n"
    "no estimate: the state estimate of that snapshot does not cover the point's buses (the "
    "network around it was not observable, or the estimate failed), so nothing implies a "
    "value for it.\nAn empty lane means it never happened in the period.")
AXIS_WIDTH = 86  #: left axes share one width so the time plots line up


def mask_runs(x: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """Start and end x of every run of True in ``mask``, flattened (s0, e0, s1, e1, …); a
    run of one snapshot spans half a step either side so it stays visible."""
    if not mask.any():
        return np.array([])
    edges = np.diff(np.r_[0, mask.astype(np.int8), 0])
    starts, stops = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1) - 1
    half = 0.5 * float(np.median(np.diff(x))) if x.size > 1 else 30.0
    return np.column_stack([x[starts] - half, x[stops] + half]).ravel()


def _plot(parent: QWidget, date_axis: bool = True, **labels) -> pg.PlotWidget:
    axes = {"bottom": pg.DateAxisItem(utcOffset=0)} if date_axis else {}
    w = pg.PlotWidget(parent, axisItems=axes, background=COLOURS["plot_bg"])
    w.showGrid(x=False, y=False)
    for side, text in labels.items():
        w.setLabel(side, text)
    w.getPlotItem().getViewBox().setMouseMode(pg.ViewBox.PanMode)
    for side in ("left", "bottom"):
        if not date_axis or side == "left":
            w.getAxis(side).enableAutoSIPrefix(False)  # the unit is in the label
    return w


def _with_key(key: QWidget, plot: QWidget, parent: QWidget) -> QWidget:
    """A plot with its key above it, outside the data."""
    box = QWidget(parent)
    layout = QVBoxLayout(box)
    layout.setContentsMargins(0, 0, 0, 0)
    layout.setSpacing(0)
    layout.addWidget(key)
    layout.addWidget(plot, 1)
    return box


def _curve(plot: pg.PlotWidget, colour: str, width: float = 1.3, name: str | None = None,
           style=Qt.SolidLine) -> pg.PlotDataItem:
    item = plot.plot([], [], pen=pg.mkPen(colour, width=width, style=style), name=name,
                     connect="finite")
    item.setDownsampling(auto=True, method="peak")
    item.setClipToView(True)
    return item


class PlotPanel(QWidget):
    """The plots of one point; call :meth:`show_trace` to fill them."""

    def __init__(self, parent: QWidget | None = None):
        super().__init__(parent)
        self.trace: PointTrace | None = None
        self.title = QLabel("No point selected")
        self.title.setObjectName("plotTitle")
        self.title.setWordWrap(True)
        self.title.setSizePolicy(QSizePolicy.Preferred, QSizePolicy.Fixed)

        self.series = _plot(self, left="value")
        self.series_key = PlotKey(self)
        self.strip = _plot(self)
        self.strip.setToolTip(STRIP_HELP)
        self.strip_key = PlotKey(self)
        self.strip_key.setToolTip(STRIP_HELP)
        self.strip.setFixedHeight(96)
        self.strip.setMouseEnabled(x=True, y=False)
        self.strip.getAxis("left").setTicks([[(i, t) for i, t in enumerate(STRIP_ROWS)]])
        self.strip.setYRange(-0.7, len(STRIP_ROWS) + 0.1, padding=0)
        self.strip.getAxis("bottom").setStyle(showValues=False)
        self.residual = _plot(self, left="measured − implied")
        self.residual_key = PlotKey(self)
        self.scatter = _plot(self, date_axis=False, left="measured", bottom="implied")
        # The strip sits right under the series and shares its width: a plain link lines
        # them up. The residual plot is narrower, so its range follows by value instead.
        self.strip.setXLink(self.series)
        self._syncing = False
        self.series.sigXRangeChanged.connect(self._on_series_range)
        self.residual.sigXRangeChanged.connect(self._on_residual_range)
        for p in (self.series, self.strip, self.residual, self.scatter):
            p.getAxis("left").setWidth(AXIS_WIDTH)

        c = COLOURS
        self.curves: dict[str, pg.GraphicsObject] = {
            "raw": _curve(self.series, c["raw"], 1.0, "as received", Qt.DotLine),
            "implied": _curve(self.series, c["implied"], 1.0, "network implies"),
            "followed": _curve(self.series, c["followed"], 3.0, "reads instead"),
            "measured": _curve(self.series, c["measured"], 1.0, "measured"),
            "residual": _curve(self.residual, c["measured"], 1.0, "residual"),
            "model": _curve(self.residual, c["model_wide"], 4.0, "fitted error"),
        }
        self.curves["model"].setZValue(-1)  # under the residual it explains
        for key in STRIP_KEYS:
            item = self.strip.plot([], [], pen=pg.mkPen(c[f"strip_{key}"], width=7))
            self.curves[f"strip_{key}"] = item
        band = pg.LinearRegionItem((0, 0), orientation="horizontal", movable=False,
                                   brush=pg.mkBrush(c["band"]), pen=pg.mkPen(c["band_edge"]))
        band.setZValue(-10)
        self.residual.addItem(band)
        self.band = band
        self.residual.addItem(pg.InfiniteLine(pos=0, angle=0, pen=pg.mkPen(c["axis"], width=1)))
        dots = pg.ScatterPlotItem(size=3, pen=None, brush=pg.mkBrush(c["scatter"]))
        self.scatter.addItem(dots)
        self.curves["scatter"] = dots
        ref = pg.mkPen(c["reference"], width=1, style=Qt.DashLine)
        self.ref_plus = pg.InfiniteLine(pos=(0, 0), angle=45, pen=ref, label="+1",
                                        labelOpts={"position": 0.92, "color": c["reference"]})
        self.ref_minus = pg.InfiniteLine(pos=(0, 0), angle=-45, pen=ref, label="−1",
                                         labelOpts={"position": 0.92, "color": c["reference"]})
        self.fit_line = pg.InfiniteLine(pos=(0, 0), angle=45, pen=pg.mkPen(c["model"], width=2))
        for item in (self.ref_plus, self.ref_minus, self.fit_line):
            self.scatter.addItem(item)
        self.scatter_note = pg.TextItem("", color=c["axis"], anchor=(0.5, 0.5))
        self.scatter.addItem(self.scatter_note, ignoreBounds=True)
        self.scatter_key = PlotKey(self)

        lower = QSplitter(Qt.Horizontal, self)
        lower.addWidget(_with_key(self.residual_key, self.residual, self))
        lower.addWidget(_with_key(self.scatter_key, self.scatter, self))
        lower.setSizes([460, 300])
        top = QWidget(self)
        top_layout = QVBoxLayout(top)
        top_layout.setContentsMargins(0, 0, 0, 0)
        top_layout.setSpacing(0)
        top_layout.addWidget(self.series_key)
        top_layout.addWidget(self.series, 1)
        top_layout.addWidget(self.strip)
        top_layout.addWidget(self.strip_key)
        split = QSplitter(Qt.Vertical, self)
        split.addWidget(top)
        split.addWidget(lower)
        split.setSizes([540, 340])
        layout = QVBoxLayout(self)
        layout.setContentsMargins(4, 4, 4, 4)
        layout.addWidget(self.title)
        layout.addWidget(split, 1)
        self.show_trace(None, "No point selected")

    def show_trace(self, trace: PointTrace | None, title: str) -> None:
        """Fill every plot from ``trace`` (None clears them and shows only ``title``)."""
        self.trace = trace
        self.title.setText(title)
        if trace is None:
            for item in self.curves.values():
                item.setData([], [])
            self.band.setRegion((0, 0))
            self.fit_line.setVisible(False)
            for key in (self.series_key, self.residual_key, self.scatter_key, self.strip_key):
                key.clear()
            self._empty_scatter("")
            for p in (self.series, self.residual):
                p.setRange(xRange=(0, 1), yRange=(0, 1), padding=0)
            return
        x = trace.x
        unit = trace.unit
        self.series.setLabel("left", f"value ({unit})")
        self.residual.setLabel("left", f"measured − implied ({unit})")
        self.scatter.setLabel("left", f"measured ({unit})")
        against = "reads instead" if trace.followed is not None else "implied"
        self.scatter.setLabel("bottom", f"{against} ({unit})")
        self.curves["measured"].setData(x, trace.measured)
        self.curves["implied"].setData(x, trace.implied)
        raw = trace.raw if trace.raw is not None else np.array([])
        self.curves["raw"].setData(x[: raw.size], raw)
        followed = trace.followed if trace.followed is not None else np.array([])
        self.curves["followed"].setData(x[: followed.size], followed)
        self.curves["residual"].setData(x, trace.residual)
        model = trace.model_residual
        self.curves["model"].setData(x[: 0 if model is None else model.size],
                                     np.array([]) if model is None else model)
        masks = (trace.missing, trace.out_of_service, trace.not_estimated)
        lanes = []
        for row, (key, mask) in enumerate(zip(STRIP_KEYS, masks, strict=True)):
            xs = mask_runs(x, mask)
            self.curves[f"strip_{key}"].setData(xs, np.full(xs.size, float(row)),
                                                connect="pairs")
            lanes.append((COLOURS[f"strip_{key}"],
                          f"{STRIP_ROWS[row]}: {span_text(int(mask.sum()), x)}"))
        self.strip_key.show_entries(lanes)
        band = trace.band if math.isfinite(trace.band) else 0.0
        self.band.setRegion((-band, band))
        points = trace.scatter()
        self.curves["scatter"].setData(*points)
        if trace.slope is not None and trace.followed is None:
            self.fit_line.setAngle(math.degrees(math.atan(trace.slope)))
            self.fit_line.setPos((0.0, trace.intercept))
            self.fit_line.setVisible(True)
        else:
            self.fit_line.setVisible(False)
        self._fill_keys(trace)
        for p in (self.series, self.residual):
            p.enableAutoRange()
        if points[0].size:
            self.scatter_note.setText("")
            self.scatter.enableAutoRange()
        else:
            self._empty_scatter("no implied values")

    def _empty_scatter(self, note: str) -> None:
        """No pairs: a neutral range (not the previous point's) and a note why."""
        self.curves["scatter"].setData([], [])
        self.scatter.disableAutoRange()
        self.scatter.setRange(xRange=(-1, 1), yRange=(-1, 1), padding=0)
        self.scatter_note.setText(note)
        self.scatter_note.setPos(0, 0)

    def _fill_keys(self, trace: PointTrace) -> None:
        c = COLOURS
        series = [(c["measured"], "measured"), (c["implied"], "network implies")]
        if trace.raw is not None:
            series.append((c["raw"], "as received"))
        if trace.followed is not None:
            series.append((c["followed"], f"reads instead: {trace.followed_label}"))
        self.series_key.show_entries(series)
        residual = [(c["measured"], "residual"), (c["band_edge"], "accuracy class band")]
        residual.append((c["model_wide"], trace.model_label or "no fault model"))
        self.residual_key.show_entries(residual)
        if trace.followed is not None:
            scatter = [(c["scatter"], "measured against what it reads instead")]
        else:
            scatter = [(c["scatter"], "measured against implied"),
                       (c["reference"], "±1: right or reversed sign")]
            if trace.slope is not None:
                scatter.append((c["model"], "fitted line"))
        self.scatter_key.show_entries(scatter)

    def _on_series_range(self, _view, span) -> None:
        self._follow(self.residual, span)

    def _on_residual_range(self, _view, span) -> None:
        self._follow(self.series, span)

    def _follow(self, plot: pg.PlotWidget, span) -> None:
        if self._syncing:
            return
        self._syncing = True
        try:
            plot.setXRange(*span, padding=0)
        finally:
            self._syncing = False
