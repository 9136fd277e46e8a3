"""The ``calibra`` command line.

Each subcommand is a :class:`Command`: a function that adds its arguments and a function that
runs it and returns the exit code, both from the subcommand's module (``check``, ``import``
in ``site_import``, ``estimate``, ``review``, ``ledger`` here; ``open`` in
:mod:`calibra.gui.launch`, which is free of Qt). What the subcommands share
is in :mod:`calibra.cli.common`. Add a subcommand by appending to :data:`COMMANDS`.

Exit codes: 0 done (the site is usable), 1 the data is not usable, 2 the command was used
wrongly (unknown option, missing folder). Problems with the user's data are printed one per
line, never as a Python traceback.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import calibra
from calibra.cli import check, estimate, ledger, review, site_import
from calibra.cli.common import EXIT_OK, EXIT_UNUSABLE, EXIT_USAGE, UsageError
from calibra.gui import launch

__all__ = ["COMMANDS", "EXIT_OK", "EXIT_UNUSABLE", "EXIT_USAGE", "Command", "UsageError",
           "build_parser", "main"]


@dataclass(frozen=True)
class Command:
    """One subcommand: its name, one-line help, argument setup and the function that runs it."""

    name: str
    help: str
    add_arguments: Callable[[argparse.ArgumentParser], None]
    run: Callable[[argparse.Namespace], int]


COMMANDS: list[Command] = [
    Command(
        "check",
        "load a site folder and list what was loaded and every problem found",
        check.add_arguments,
        check.run,
    ),
    Command(
        "import",
        "build a site folder from a historian export, a point list and a network file, then "
        "load it and list every problem (--preview: write nothing, show the mapping)",
        site_import.add_arguments,
        site_import.run,
    ),
    Command(
        "estimate",
        "estimate every snapshot of a site and summarise convergence and the chi-square test",
        estimate.add_arguments,
        estimate.run,
    ),
    Command(
        "review",
        "review a period: find meters with consistent errors, update the ledger, write "
        "findings.csv, work orders and a summary",
        review.add_arguments,
        review.run,
    ),
    Command(
        "ledger",
        "list the open findings of a site's ledger, or confirm, correct, mark repaired, "
        "dismiss, annotate or undo them; show the history",
        ledger.add_arguments,
        ledger.run,
    ),
    Command(
        "open",
        "open a site in the desktop application (with no command at all: the last site used, "
        "else the bundled sample site)",
        launch.add_arguments,
        launch.run,
    ),
]


# ----------------------------------------------------------------------------- entry point
def build_parser(commands: Sequence[Command] | None = None) -> argparse.ArgumentParser:
    """The argument parser with one subparser per command (default: :data:`COMMANDS`)."""
    parser = argparse.ArgumentParser(
        prog="calibra",
        description="Find telemetry points whose errors are consistent over a week.",
    )
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
