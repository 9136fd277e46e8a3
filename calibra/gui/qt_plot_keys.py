"""Keys of the plots: one line of coloured marks and words, drawn above a plot, never over
its data."""

from __future__ import annotations

from html import escape

import numpy as np
from PySide6.QtWidgets import QLabel, QSizePolicy, QWidget


def span_text(count: int, x: np.ndarray) -> str:
    """How many snapshots a lane marks, and roughly how long that is ('none' when none)."""
    if count == 0:
        return "none"
    step = float(np.median(np.diff(x))) if x.size > 1 else 60.0
    hours = count * step / 3600.0
    length = f"{hours:.1f} h" if hours < 48 else f"{hours / 24:.1f} days"
    return f"{count:,} snapshot{'s' if count != 1 else ''} ({length})"


class PlotKey(QLabel):
    """A plot's key: ``show_entries([(colour, words), ...])``."""

    def __init__(self, parent: QWidget | None = None):
        super().__init__(parent)
        self.setObjectName("plotKey")
        self.setWordWrap(True)
        self.setSizePolicy(QSizePolicy.Preferred, QSizePolicy.Fixed)
        self.entries: list[tuple[str, str]] = []

    def show_entries(self, entries: list[tuple[str, str]]) -> None:
        self.entries = list(entries)
        self.setText("&nbsp;&nbsp; ".join(
            f'<span style="color:{colour[:7]}">━━</span>&nbsp;{escape(words)}'
            for colour, words in entries))

    def clear(self) -> None:  # noqa: D102 (QLabel API)
        self.entries = []
        super().clear()
