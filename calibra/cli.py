"""The ``calibra`` command line.

Each subcommand is a :class:`Command`: a function that adds its arguments and a function that
runs it and returns the exit code. Add a subcommand by appending to :data:`COMMANDS`.

Exit codes: 0 done (the site is usable), 1 the data is not usable, 2 the command was used
wrongly (unknown option, missing folder). Problems with the user's data are printed one per
line, never as a Python traceback.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

from calibra.io import load_site, summarize
from calibra.model.site import Site, SiteLoadError

EXIT_OK, EXIT_UNUSABLE, EXIT_USAGE = 0, 1, 2


class UsageError(Exception):
    """The command line asks for something impossible (reported with exit code 2)."""


@dataclass(frozen=True)
class Command:
    """One subcommand: its name, one-line help, argument setup and the function that runs it."""

    name: str
    help: str
    add_arguments: Callable[[argparse.ArgumentParser], None]
    run: Callable[[argparse.Namespace], int]


# ----------------------------------------------------------------------------- check
def _check_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("site", type=Path, help="the site folder")
    parser.add_argument(
        "--strict", action="store_true", help="treat warnings as making the site unusable"
    )


def _site_folder(path: Path) -> Path:
    if not path.exists():
        raise UsageError(f"no such folder: {path}")
    if not path.is_dir():
        raise UsageError(f"not a folder: {path}")
    return path


def format_summary(site: Site) -> list[str]:
    """The lines that describe what was loaded."""
    s = summarize(site)
    quantities = ", ".join(f"{q} {n}" for q, n in s["points_by_quantity"].items() if n)
    lines = [
        f"site: {s['name']} (timezone {s['timezone']})",
        f"network: {s['buses']} buses in {s['substations']} substations, "
        f"{s['zero_injection_buses']} zero-injection; {s['branches']} branches, "
        f"{s['branches_in_service']} in service",
        f"points: {s['points']}" + (f" ({quantities})" if quantities else ""),
    ]
    if s["snapshots"]:
        step = s["typical_interval"]
        lines.append(
            f"snapshots: {s['snapshots']} from {s['first_snapshot']:%Y-%m-%d %H:%M} to "
            f"{s['last_snapshot']:%Y-%m-%d %H:%M} UTC"
            + (f", typically every {_duration(step)}" if step is not None else "")
            + f"; {100 * s['missing_fraction']:.1f}% of values missing"
        )
        worst = sorted(s["missing_by_point"].items(), key=lambda kv: -kv[1])[:5]
        worst = [(t, n) for t, n in worst if n]
        if worst:
            lines.append(
                "most missing: " + ", ".join(
                    f"{t} {100 * n / s['snapshots']:.0f}%" for t, n in worst
                )
            )
    else:
        lines.append("snapshots: none")
    return lines


def _duration(step) -> str:
    seconds = step.total_seconds()
    if seconds % 3600 == 0:
        return f"{seconds / 3600:g} h"
    if seconds % 60 == 0:
        return f"{seconds / 60:g} min"
    return f"{seconds:g} s"


def _tally(problems) -> str:
    errors = sum(p.severity == "error" for p in problems)
    warnings = len(problems) - errors
    return f"{errors} error{'s' * (errors != 1)}, {warnings} warning{'s' * (warnings != 1)}"


def run_check(args: argparse.Namespace) -> int:
    """Load a site, print what was loaded and every problem; 0 if usable, 1 if not."""
    folder = _site_folder(args.site)
    try:
        site = load_site(folder, strict=args.strict)
    except SiteLoadError as exc:
        for problem in exc.problems:
            print(problem)
        strict = " in strict mode" if args.strict and not any(
            p.severity == "error" for p in exc.problems) else ""
        print(f"result: not usable{strict} ({_tally(exc.problems)})")
        return EXIT_UNUSABLE
    for line in format_summary(site):
        print(line)
    for problem in site.problems:
        print(problem)
    print(f"result: usable ({_tally(site.problems)})")
    return EXIT_OK


def load_for_command(folder: Path, start: str | None = None,
                     end: str | None = None) -> Site | None:
    """Load a site for a command that works on it (only the snapshots from ``start`` to
    ``end`` when given, so a long history is never read whole); print problems; None when not
    usable."""
    _check_order(start, end)
    try:
        site = load_site(_site_folder(folder), start=start, end=end)
    except ValueError as exc:  # a --from/--to that is not a time
        raise UsageError(str(exc)) from exc
    except SiteLoadError as exc:
        report_unusable(folder, exc)
        return None
    for line in format_summary(site):
        print(line)
    if site.problems:
        print(f"load: {_tally(site.problems)} (listed by 'calibra check {folder}')")
    return site


def _check_order(start: str | None, end: str | None) -> None:
    """A --from later than --to is a usage error (naive times compared as they are written:
    both are in the site's time zone)."""
    if start is None or end is None:
        return
    import pandas as pd

    try:
        a, b = pd.Timestamp(start), pd.Timestamp(end)
    except ValueError:
        return  # reported by the loader with the text
    if (a.tzinfo is None) != (b.tzinfo is None):
        a = a.tz_localize("UTC") if a.tzinfo is None else a
        b = b.tz_localize("UTC") if b.tzinfo is None else b
    if a > b:
        raise UsageError(f"--from {start} is later than --to {end}")


def report_unusable(folder: Path, exc: SiteLoadError) -> None:
    """Print the problems that make a site unusable and the verdict line."""
    for problem in exc.problems:
        print(problem)
    print(f"result: not usable ({_tally(exc.problems)}); see 'calibra check {folder}'")


def period_arguments(parser: argparse.ArgumentParser) -> None:
    """--from/--to options shared by the commands that work on a period."""
    parser.add_argument("--from", dest="start", metavar="TIME",
                        help="first snapshot to use (ISO 8601; naive times in the site timezone)")
    parser.add_argument("--to", dest="end", metavar="TIME", help="last snapshot to use")


def parse_period(site: Site, args: argparse.Namespace):
    """The --from/--to values as UTC timestamps (None when not given)."""
    from calibra.model.times import read_local

    try:
        return [None if text is None else read_local(text, site.timezone)
                for text in (args.start, args.end)]
    except ValueError as exc:
        raise UsageError(str(exc)) from exc


def _lazy(module: str, name: str) -> Callable:
    """A function from another module, imported on first call (keeps start-up light)."""

    def call(*args, **kwargs):
        import importlib

        return getattr(importlib.import_module(module), name)(*args, **kwargs)

    return call


COMMANDS: list[Command] = [
    Command(
        "check",
        "load a site folder and list what was loaded and every problem found",
        _check_arguments,
        run_check,
    ),
    Command(
        "estimate",
        "estimate every snapshot of a site and summarise convergence and the chi-square test",
        _lazy("calibra.cli_estimate", "add_arguments"),
        _lazy("calibra.cli_estimate", "run"),
    ),
    Command(
        "review",
        "review a period: find meters with consistent errors, update the ledger, write "
        "findings.csv, work orders and a summary",
        _lazy("calibra.cli_review", "add_arguments"),
        _lazy("calibra.cli_review", "run"),
    ),
    Command(
        "ledger",
        "list the open findings of a site's ledger, or confirm, correct, mark repaired, "
        "dismiss, annotate or undo them; show the history",
        _lazy("calibra.cli_ledger", "add_arguments"),
        _lazy("calibra.cli_ledger", "run"),
    ),
    Command(
        "open",
        "open a site in the desktop application (with no command at all: the last site used, "
        "else the bundled sample site)",
        _lazy("calibra.gui.launch", "add_arguments"),
        _lazy("calibra.gui.launch", "run"),
    ),
]


# ----------------------------------------------------------------------------- entry point
def build_parser(commands: Sequence[Command] | None = None) -> argparse.ArgumentParser:
    """The argument parser with one subparser per command (default: :data:`COMMANDS`)."""
    parser = argparse.ArgumentParser(
        prog="calibra",
        description="Find telemetry points whose errors are consistent over a week.",
    )
    import calibra

    parser.add_argument("--version", action="version", version=f"calibra {calibra.__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    for command in COMMANDS if commands is None else commands:
        p = sub.add_parser(command.name, help=command.help, description=command.help)
        command.add_arguments(p)
        p.set_defaults(run=command.run)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the exit code. From the shell, ``calibra`` with no
    arguments opens the desktop application."""
    if argv is None and len(sys.argv) <= 1:
        argv = ["open"]
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse has printed the usage or the help
        return int(exc.code) if isinstance(exc.code, int) else EXIT_USAGE
    try:
        return args.run(args)
    except UsageError as exc:
        print(f"calibra {args.command}: {exc}", file=sys.stderr)
        return EXIT_USAGE
    except BrokenPipeError:  # output piped into a reader that stopped (``| head``)
        sys.stderr.close()
        return EXIT_OK
    except OSError as exc:
        print(f"calibra {args.command}: {exc.strerror or exc} ({exc.filename})", file=sys.stderr)
        return EXIT_UNUSABLE
    except KeyboardInterrupt:
        print(f"calibra {args.command}: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
