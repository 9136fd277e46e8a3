"""Starting the application from the command line: 'calibra open [SITE]' and plain
'calibra'."""

from __future__ import annotations

import argparse
import sys
from dataclasses import replace

from PySide6.QtCore import QTimer
from PySide6.QtWidgets import QApplication

import calibra.gui.launch as launch
from calibra import cli
from calibra.app_settings import RecentSites
from calibra.cli import main


def test_plain_calibra_opens_the_application(monkeypatch):
    seen = {}

    def fake_run(args):
        seen["site"] = args.site
        return 0

    monkeypatch.setattr(cli, "COMMANDS", [replace(c, run=fake_run) if c.name == "open" else c
                                          for c in cli.COMMANDS])
    monkeypatch.setattr(sys, "argv", ["calibra"])
    assert main() == 0
    assert seen == {"site": None}


def test_open_a_missing_folder_is_a_usage_error(tmp_path, capsys):
    assert main(["open", str(tmp_path / "nowhere")]) == 2
    assert "no such folder" in capsys.readouterr().err


def test_default_site_is_the_last_one_else_the_sample(tmp_path):
    assert launch.default_site() == (launch.SAMPLE_SITE if (launch.SAMPLE_SITE / "site.toml")
                                     .exists() else None)
    folder = tmp_path / "mysite"
    folder.mkdir()
    RecentSites().add(folder)  # the configuration folder is private to the test
    assert launch.default_site() == folder.resolve()


def test_run_app_shows_the_site_and_closes_cleanly(qapp, site_folder):
    from calibra.gui.qt_main import MainWindow

    state = {}

    def check():
        windows = [w for w in QApplication.topLevelWidgets() if isinstance(w, MainWindow)
                   and w.isVisible()]
        if not windows or windows[0].jobs.busy or windows[0].site is None:
            QTimer.singleShot(100, check)
            return
        state["title"] = windows[0].windowTitle()
        state["icon"] = not windows[0].windowIcon().isNull()
        windows[0].close()
        qapp.quit()

    # Quit once, here: a second, automatic quit when the last window closes would arrive
    # after app.exec() has returned and stop every later event loop of the test session.
    qapp.setQuitOnLastWindowClosed(False)
    QTimer.singleShot(100, check)
    args = argparse.Namespace(site=site_folder, no_review=True)
    try:
        assert launch.run(args) == 0
    finally:
        qapp.setQuitOnLastWindowClosed(True)
    assert state == {"title": "Small test grid — calibra", "icon": True}
