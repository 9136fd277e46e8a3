"""What the subcommands share: exit codes, usage errors, the site folder, the period options and
loading a site with its problems printed."""

from __future__ import annotations

import argparse
from collections.abc import Sequence
from pathlib import Path

import pandas as pd

from calibra.io import load_site, site_summary_lines
from calibra.io.problems import ProblemLog
from calibra.io.site_config import SiteConfig, read_site_config
from calibra.model.site import LoadProblem, Site, SiteLoadError
from calibra.model.times import read_local

EXIT_OK, EXIT_UNUSABLE, EXIT_USAGE = 0, 1, 2


class UsageError(Exception):
    """The command line asks for something impossible (reported with exit code 2)."""


def site_folder(path: Path) -> Path:
    """``path`` when it is a folder; UsageError otherwise."""
    if not path.exists():
        raise UsageError(f"no such folder: {path}")
    if not path.is_dir():
        raise UsageError(f"not a folder: {path}")
    return path


def tally(problems: Sequence[LoadProblem]) -> str:
    """``2 errors, 1 warning``."""
    errors = sum(p.severity == "error" for p in problems)
    warnings = len(problems) - errors
    return f"{errors} error{'s' * (errors != 1)}, {warnings} warning{'s' * (warnings != 1)}"


def _site_config(folder: Path) -> tuple[SiteConfig | None, ProblemLog]:
    log = ProblemLog()
    return read_site_config(folder, log), log


def site_timezone(folder: Path) -> str:
    """The time zone of the site folder's ``site.toml``; UsageError naming the problem when it
    cannot be read."""
    site_folder(folder)
    config, log = _site_config(folder)
    if config is None:
        raise UsageError("; ".join(str(p) for p in log.items) or f"{folder}: no site.toml")
    return config.timezone


def period_arguments(parser: argparse.ArgumentParser) -> None:
    """--from/--to options shared by the commands that work on a period."""
    parser.add_argument("--from", dest="start", metavar="TIME",
                        help="first snapshot to use (ISO 8601; naive times in the site timezone)")
    parser.add_argument("--to", dest="end", metavar="TIME", help="last snapshot to use")


def read_period(folder: Path,
                args: argparse.Namespace) -> tuple[pd.Timestamp | None, pd.Timestamp | None]:
    """The --from/--to values as UTC moments (None when not given), read in the site's time
    zone; UsageError naming the option when one is not a time, or when --from is later than
    --to."""
    if args.start is None and args.end is None:
        return None, None
    config, _ = _site_config(site_folder(folder))
    # A site.toml that cannot be read makes the site unusable and the loader says why; until
    # then the period only limits what the loader reads, in UTC like the loader's own fallback.
    timezone = config.timezone if config is not None else "UTC"
    try:
        start, end = (None if text is None else read_local(text, timezone, option)
                      for text, option in ((args.start, "--from"), (args.end, "--to")))
    except ValueError as exc:
        raise UsageError(str(exc)) from None
    if start is not None and end is not None and start > end:
        raise UsageError(f"--from {args.start} is later than --to {args.end}")
    return start, end


def report_unusable(folder: Path, exc: SiteLoadError) -> None:
    """Print the problems that make a site unusable and the verdict line."""
    for problem in exc.problems:
        print(problem)
    print(f"result: not usable ({tally(exc.problems)}); see 'calibra check {folder}'")


def load_for_command(folder: Path, start: pd.Timestamp | None = None,
                     end: pd.Timestamp | None = None) -> Site | None:
    """Load a site for a command that works on it (only the snapshots from ``start`` to
    ``end`` when given, so a long history is never read whole; see :func:`read_period`);
    print what was loaded and how many problems; None when not usable."""
    try:
        site = load_site(site_folder(folder), start=start, end=end)
    except SiteLoadError as exc:
        report_unusable(folder, exc)
        return None
    for line in site_summary_lines(site):
        print(line)
    if site.problems:
        print(f"load: {tally(site.problems)} (listed by 'calibra check {folder}')")
    return site


#: Warnings printed one by one by a command that also writes them all to a file.
WARNINGS_SHOWN = 20


def print_problems(problems: Sequence[LoadProblem], listed: Path | None = None) -> None:
    """Print every error and, when ``listed`` names a file that holds them all, the first
    :data:`WARNINGS_SHOWN` warnings and a line counting the rest; else every warning."""
    warnings = [p for p in problems if p.severity == "warning"]
    shown = warnings[:WARNINGS_SHOWN] if listed is not None else warnings
    for problem in problems:
        if problem.severity != "warning" or any(problem is w for w in shown):
            print(problem)
    rest = warnings[len(shown):]
    if rest:
        print(f"... and {len(rest):,} more warnings ({sum(p.count for p in rest):,} values "
              f"or rows): every problem is listed in {listed}")


def print_usable(site: Site, listed: Path | None = None) -> int:
    """Print what was loaded, the problems (:func:`print_problems`) and the verdict of a
    usable site; EXIT_OK."""
    for line in site_summary_lines(site):
        print(line)
    print_problems(site.problems, listed)
    print(f"result: usable ({tally(site.problems)})")
    return EXIT_OK
