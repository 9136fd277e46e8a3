"""Window title and status bar as the engineer sees them."""

from __future__ import annotations

from PySide6.QtGui import QStatusTipEvent
from PySide6.QtWidgets import QApplication, QToolButton

from tests.gui.conftest import open_and_wait


def test_title_names_the_application_once(qtbot, window, site_folder):
    open_and_wait(qtbot, window, site_folder)
    title = window.windowTitle()
    assert "Small test grid" in title
    assert title.lower().count("calibra") == 1
    # Platforms append the display name unless the title already ends with it.
    assert title.endswith(QApplication.applicationDisplayName())


def test_message_stays_while_hovering_actions(qtbot, window):
    window.say("Review done in 3.0 s: 2 finding(s)")
    button = next(b for b in window.findChildren(QToolButton)
                  if b.defaultAction() is window.review_action)
    QApplication.sendEvent(button, QStatusTipEvent(window.review_action.statusTip()))
    assert window.message.text() == "Review done in 3.0 s: 2 finding(s)"
    assert window.message.isVisible()
    assert window.statusBar().currentMessage() == ""
    assert window.status.hint.text() == window.review_action.statusTip()
    QApplication.sendEvent(button, QStatusTipEvent(""))  # the mouse moves on
    assert window.message.text() == "Review done in 3.0 s: 2 finding(s)"
    assert window.status.hint.text() == ""
