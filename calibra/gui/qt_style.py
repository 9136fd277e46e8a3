"""calibra's own look: one palette for plots, diagram and list, the style sheet and the icon."""

from __future__ import annotations

import sys
from pathlib import Path

from PySide6.QtCore import Qt
from PySide6.QtGui import QColor, QIcon, QPainter, QPixmap

from calibra.ledger.states import FindingState

#: The palette (hex RGB or RGBA), chosen for calibra.
COLOURS = {
    "plot_bg": "#fbfbf8",
    "axis": "#5a6169",
    "measured": "#176b87",
    "implied": "#e08a1e",
    "raw": "#98a3ab",
    "followed": "#4f8f3a",
    "model": "#a4286a",
    "model_wide": "#dfb3cb",
    "scatter": "#176b8766",
    "band": "#7fb06d33",
    "band_edge": "#7fb06d",
    "reference": "#8c8f93",
    "strip_missing": "#d4a72c",
    "strip_open": "#6b5ca5",
    "strip_unestimated": "#c8553d",
    "bus": "#2f3b46",
    "branch": "#7d8891",
    "branch_open": "#c3c8cc",
    "meter": "#a9b2b9",
    "flagged": "#e08a1e",
    "selected": "#c8153d",
    "focus": "#176b87",
}

#: Soft fills for substations on the diagram, used in turn.
SUBSTATION_FILLS = ("#e6efe9", "#ece7f3", "#f3ede2", "#e3edf3", "#f2e6ea", "#edf0df")

#: Ledger states and the colour of their mark in the list.
STATE_COLOURS = {
    FindingState.NEW: "#e08a1e",
    FindingState.CONFIRMED: "#a4286a",
    FindingState.CORRECTED: "#176b87",
    FindingState.REPAIRED: "#6b5ca5",
    FindingState.VERIFIED: "#4f8f3a",
    FindingState.DISMISSED: "#9aa0a6",
}

STYLE_SHEET = """
QLabel#plotTitle { font-weight: 600; padding: 2px 4px; }
QLabel#sectionTitle { font-weight: 600; color: #2f3b46; padding-top: 4px; }
QLabel#focusNote { color: #176b87; }
QToolBar { spacing: 4px; }
QTreeView::item { padding: 1px 0px; }
"""

#: Where the images are: the source tree's assets/ (a clone, an editable install), then where
#: an installed copy puts them (pyproject.toml, [tool.setuptools.data-files]).
ASSET_DIRS = (Path(__file__).resolve().parents[2] / "assets",
              Path(sys.prefix) / "share" / "calibra" / "assets")
ICON_FILES = ("calibra.svg", "calibra-256.png")


def asset_dir() -> Path | None:
    """The first folder that holds the application icon, or None."""
    return next((d for d in ASSET_DIRS if (d / ICON_FILES[0]).exists()), None)


def app_icon() -> QIcon:
    """The application icon (an empty icon when the assets are not there)."""
    icon = QIcon()
    folder = asset_dir()
    for name in ICON_FILES if folder is not None else ():
        if (folder / name).exists():
            icon.addFile(str(folder / name))
    return icon


def state_dot(state: str, size: int = 10) -> QIcon:
    """A small filled circle in the colour of a ledger state."""
    pix = QPixmap(size, size)
    pix.fill(Qt.transparent)
    painter = QPainter(pix)
    painter.setRenderHint(QPainter.Antialiasing)
    painter.setPen(Qt.NoPen)
    painter.setBrush(QColor(STATE_COLOURS.get(state, "#9aa0a6")))
    painter.drawEllipse(1, 1, size - 2, size - 2)
    painter.end()
    return QIcon(pix)


def configure_plots() -> None:
    """pyqtgraph defaults for calibra's plots: our colours; lines not antialiased, which
    draws a week of one-minute values several times faster."""
    import pyqtgraph as pg

    pg.setConfigOptions(antialias=False, background=COLOURS["plot_bg"],
                        foreground=COLOURS["axis"])
