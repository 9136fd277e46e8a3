"""The status bar: the latest message stays; what a hovered action does is shown beside it.

Qt's own handling writes an action's status tip over the status bar's message and then blanks
it when the mouse moves on, so the result of a review or an action was lost on the first
hover. Here the tips go to a separate, quieter label on the right.
"""

from __future__ import annotations

from PySide6.QtCore import QEvent, QObject
from PySide6.QtWidgets import QLabel, QMainWindow, QProgressBar, QPushButton


class StatusArea(QObject):
    """Message, hover hint, progress bar and cancel button of a main window's status bar."""

    def __init__(self, window: QMainWindow):
        super().__init__(window)
        self.message = QLabel("", window)
        self.hint = QLabel("", window)
        self.hint.setObjectName("hoverHint")
        self.progress = QProgressBar(window)
        self.progress.setMaximumWidth(260)
        self.progress.setTextVisible(True)
        self.cancel_button = QPushButton("Cancel", window)
        bar = window.statusBar()
        bar.addWidget(self.message, 1)
        bar.addPermanentWidget(self.hint)
        bar.addPermanentWidget(self.progress)
        bar.addPermanentWidget(self.cancel_button)
        window.installEventFilter(self)

    def eventFilter(self, watched: QObject, event: QEvent) -> bool:  # noqa: N802 (Qt API)
        """Status tips go to the hint label, never over the message."""
        if event.type() == QEvent.StatusTip:
            self.hint.setText(event.tip())
            return True
        return super().eventFilter(watched, event)
