"""``calibra open``: start the desktop application (Qt is imported only when it runs).

Kept free of Qt so that building the command-line parser stays light.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

#: The bundled sample site, when calibra runs from its source folder.
SAMPLE_SITE = Path(__file__).resolve().parents[2] / "sample_site"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """The ``open`` subcommand's arguments."""
    parser.add_argument("site", nargs="?", type=Path,
                        help="the site folder (default: the last site opened, else the "
                             "bundled sample site)")
    parser.add_argument("--no-review", action="store_true",
                        help="do not start a review when the site has loaded")


def default_site() -> Path | None:
    """The site to open when none is named: the last one used, else the bundled sample."""
    from calibra.app_settings import RecentSites

    last = RecentSites().last()
    if last is not None:
        return last
    return SAMPLE_SITE if (SAMPLE_SITE / "site.toml").exists() else None


def run(args: argparse.Namespace) -> int:
    """Open the application window; returns the exit code when it closes."""
    folder = args.site
    if folder is not None and not folder.is_dir():
        print(f"calibra open: no such folder: {folder}", file=sys.stderr)
        return 2
    try:
        from calibra.gui.qt_app import run_app
    except ImportError as exc:
        print(f"calibra open: the desktop application needs PySide6 and pyqtgraph ({exc})",
              file=sys.stderr)
        return 1
    return run_app(folder if folder is not None else default_site(),
                   review=not args.no_review)
