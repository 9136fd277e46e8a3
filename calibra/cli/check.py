"""``calibra check SITE``: load a site folder, print what was loaded and every problem."""

from __future__ import annotations

import argparse
from pathlib import Path

from calibra.cli.common import EXIT_UNUSABLE, print_usable, site_folder, tally
from calibra.io import load_site
from calibra.model.site import SiteLoadError


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """The site folder and --strict."""
    parser.add_argument("site", type=Path, help="the site folder")
    parser.add_argument(
        "--strict", action="store_true", help="treat warnings as making the site unusable"
    )


def run(args: argparse.Namespace) -> int:
    """Load a site, print what was loaded and every problem; 0 if usable, 1 if not."""
    folder = site_folder(args.site)
    try:
        site = load_site(folder, strict=args.strict)
    except SiteLoadError as exc:
        for problem in exc.problems:
            print(problem)
        strict = " in strict mode" if args.strict and not any(
            p.severity == "error" for p in exc.problems) else ""
        print(f"result: not usable{strict} ({tally(exc.problems)})")
        return EXIT_UNUSABLE
    return print_usable(site)
