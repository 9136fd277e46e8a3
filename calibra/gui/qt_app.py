"""Start the desktop application: the Qt application object, the look, the main window."""

from __future__ import annotations

import sys
from pathlib import Path

from PySide6.QtWidgets import QApplication

from calibra.gui.qt_compat import protect_singletons
from calibra.gui.qt_main import MainWindow
from calibra.gui.qt_style import STYLE_SHEET, app_icon, configure_plots


def application(argv: list[str] | None = None) -> QApplication:
    """The running QApplication, or a new one set up with calibra's name, icon and style."""
    protect_singletons()
    app = QApplication.instance()
    if app is None:
        app = QApplication(argv if argv is not None else [sys.argv[0] if sys.argv else "calibra"])
    app.setApplicationName("calibra")
    app.setApplicationDisplayName("calibra")
    app.setWindowIcon(app_icon())
    app.setStyleSheet(STYLE_SHEET)
    configure_plots()
    return app


def run_app(site: Path | None = None, review: bool = True) -> int:
    """Show the main window on ``site`` (None: ask for one) and run until it closes."""
    app = application()
    window = MainWindow(review_on_open=review)
    window.show()
    if site is not None:
        window.open_site(site)
    else:
        window.say("Open a site folder to begin (Site ▸ Open site…, Ctrl+O).")
    return app.exec()
