"""``calibra import FOLDER --history … --points … --network …``: build a site folder from the
exports an engineer already has, then load it and report every problem.

The work is :mod:`calibra.io.site_import`; this module reads the options and prints. With
``--preview`` nothing is written: the mapping, the exports and the network are described.
"""

from __future__ import annotations

import argparse
from pathlib import Path

import pandas as pd

from calibra.cli.common import (
    EXIT_OK,
    EXIT_UNUSABLE,
    UsageError,
    print_problems,
    print_usable,
    tally,
)
from calibra.io.import_report import plan_lines
from calibra.io.site_import import (
    ImportRefused,
    ImportRequest,
    SiteFields,
    plan_import,
    run_import,
)
from calibra.io.snapshot_settings import positive_duration
from calibra.progress import terminal_progress


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """The target folder, the three inputs, the site's fields and the mapping options."""
    parser.add_argument("folder", type=Path, help="the site folder to build (must not exist, or "
                        "be empty, unless --replace)")
    given = parser.add_argument_group("the exports")
    given.add_argument("--history", type=Path, nargs="+", required=True, metavar="FILE",
                       help="historian export(s): long (tag, time, value, quality) or wide "
                       "tables; .csv, .csv.gz or .parquet")
    given.add_argument("--points", type=Path, required=True, metavar="FILE",
                       help="the point list: .csv, .xlsx, .xlsm, .ods or .xls")
    given.add_argument("--network", type=Path, nargs="+", required=True, metavar="FILE",
                       help="a MATPOWER case (.m), an IEEE Common Data Format file (.cdf, .txt), "
                       "or the two tables buses.csv and branches.csv")
    site = parser.add_argument_group("the site")
    site.add_argument("--name", help="the site's name (default: the folder's name)")
    site.add_argument("--timezone", required=True, metavar="ZONE",
                      help="IANA time zone of the site (e.g. Europe/Oslo); times without an "
                      "offset in the exports are read in it. Required: never guessed")
    site.add_argument("--frequency", type=float, required=True, metavar="HZ",
                      help="system frequency, 50 or 60")
    site.add_argument("--base-mva", type=float, metavar="MVA",
                      help="system base; default: the network file's, or 100 MVA with tables")
    site.add_argument("--reference-bus", metavar="BUS",
                      help="the bus whose angle is zero (default: the file's reference bus, or "
                      "the first bus of the tables)")
    site.add_argument("--interval", metavar="DURATION",
                      help="snapshot grid of long exports, e.g. 1min (default: inferred and "
                      "written down)")
    site.add_argument("--max-age", metavar="DURATION",
                      help="how long a sample serves later snapshots, e.g. 15min for points "
                      "stored by exception (default: one interval)")
    mapping = parser.add_argument_group("the point list's columns")
    mapping.add_argument("--column", action="append", default=[], metavar="COLUMN=HEADER",
                         help="read calibra's COLUMN from the file's HEADER, e.g. "
                         "--column tag=\"SCADA point\" (repeatable)")
    mapping.add_argument("--sheet", help="the spreadsheet's sheet (default: the first)")
    parser.add_argument("--preview", action="store_true",
                        help="write nothing: show the mapping, the exports and the network")
    parser.add_argument("--replace", action="store_true",
                        help="build the folder even if it exists and holds files (the old "
                        "folder is kept beside it, renamed)")


def _duration(text: str | None, option: str) -> pd.Timedelta | None:
    if text is None:
        return None
    value = positive_duration(text)
    if value is None:
        raise UsageError(f"{option} {text!r} is not a duration such as 30s, 1min or 15min")
    return value


def _columns(items: list[str]) -> dict[str, str]:
    columns = {}
    for item in items:
        column, sep, header = item.partition("=")
        if not sep or not column.strip() or not header.strip():
            raise UsageError(f"--column {item!r}: write COLUMN=HEADER, e.g. "
                             "--column tag=\"Point name\"")
        if column.strip() in columns:
            raise UsageError(f"--column {column.strip()} is given twice")
        columns[column.strip()] = header.strip()
    return columns


def request_of(args: argparse.Namespace) -> ImportRequest:
    """The import the options ask for; UsageError naming an option that cannot be read."""
    fields = SiteFields(
        name=args.name if args.name is not None else args.folder.resolve().name,
        timezone=args.timezone, frequency_hz=args.frequency, base_mva=args.base_mva,
        reference_bus=args.reference_bus, interval=_duration(args.interval, "--interval"),
        max_age=_duration(args.max_age, "--max-age"))
    return ImportRequest(args.folder, tuple(args.history), args.points, tuple(args.network),
                         fields, _columns(args.column), args.sheet, args.replace)


def run(args: argparse.Namespace) -> int:
    """Plan, then (unless previewing) build and load; 0 when the new site is usable."""
    request = request_of(args)
    progress = terminal_progress()
    try:
        plan = plan_import(request, progress)
    except ImportRefused as exc:
        for problem in exc.problems:
            print(problem)
        hint = " (--replace to build it anyway)" if any(
            "is not empty" in p.message for p in exc.problems) else ""
        print(f"result: nothing written ({tally(exc.problems)}){hint}")
        return EXIT_UNUSABLE
    if args.name is None:
        print(f"note: the site is named '{request.fields.name}' after its folder (--name)")
    for line in plan_lines(plan):
        print(line)
    if args.preview:
        for problem in plan.warnings:
            print(problem)
        print("preview: nothing written")
        return EXIT_OK
    outcome = run_import(plan, progress)
    if outcome.replaced is not None:
        print(f"the folder that was there is kept as {outcome.replaced}")
    print(f"wrote {request.target}")
    if outcome.site is None:
        print_problems(outcome.problems, outcome.problems_file)
        print(f"result: not usable ({tally(outcome.problems)}); the folder is written: correct "
              f"its site.toml or the files and run 'calibra check {request.target}'")
        return EXIT_UNUSABLE
    return print_usable(outcome.site, outcome.problems_file)
