"""``calibra estimate SITE``: estimate every snapshot, day by day, and summarise the outcome."""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np

from calibra.cli.common import (
    EXIT_OK,
    EXIT_UNUSABLE,
    period_arguments,
    read_period,
    report_unusable,
    site_folder,
    tally,
)
from calibra.estimation.daywise import RN_SCREEN, estimate_by_day
from calibra.io import site_summary_lines
from calibra.model.site import SiteLoadError
from calibra.progress import terminal_progress


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("site", type=Path, help="the site folder")
    period_arguments(parser)
    parser.add_argument("--confidence", type=float, default=0.99,
                        help="confidence level of the chi-square test (default 0.99)")
    parser.add_argument("--worst", type=int, default=10,
                        help="how many points with the largest normalized residuals to list")
    parser.add_argument("--out", type=Path, default=None, metavar="DIR",
                        help="write each day's normalized residuals (Parquet) and snapshot "
                             "outcomes (CSV) to this folder")


def run(args: argparse.Namespace) -> int:
    folder = site_folder(args.site)
    start, end = read_period(folder, args)
    try:
        summary = estimate_by_day(folder, start, end, out_dir=args.out,
                                  confidence=args.confidence, progress=terminal_progress())
    except SiteLoadError as exc:
        report_unusable(folder, exc)
        return EXIT_UNUSABLE
    for line in site_summary_lines(summary.site)[:3]:
        print(line)
    if summary.problems:
        print(f"load: {tally(summary.problems)} (listed by 'calibra check {folder}')")
    for line in summary.availability:
        print(line)
    for conflict in summary.conflicts:
        print(f"status point contradicted: {conflict}")
    k = summary.snapshots
    if k == 0:
        print("result: no snapshots in the period")
        return EXIT_UNUSABLE
    conv = summary.converged
    days = f"{summary.days} UTC day" + "s" * (summary.days != 1)
    print(f"estimated {k} snapshots ({days}, one at a time) in "
          f"{summary.seconds:.1f} s ({1e3 * summary.seconds / k:.2f} ms each, reading included)")
    print(f"converged: {conv} ({100 * conv / k:.1f}%); in blocks {summary.in_blocks}, "
          f"alone {summary.alone}")
    print(f"chi-square test at {100 * args.confidence:g}%: failed in {summary.chi2_failed} of "
          f"{conv} converged snapshots ({100 * summary.chi2_failed / max(conv, 1):.1f}%)")
    if summary.partly_observable:
        n_bus = summary.site.network.n_bus if summary.site is not None else 0
        print(f"partly observable: {summary.partly_observable} snapshots (up to "
              f"{summary.most_buses_not_estimated} of {n_bus} buses not estimated; the rest "
              "estimated as usual)")
    if summary.not_observable:
        print(f"not observable at all: {summary.not_observable} snapshots")
    for reason, count in summary.reasons.most_common():
        print(f"  not converged ({count}): {reason}")
    table = summary.points.frame()
    table = table[np.isfinite(table["median_abs_rn"])]
    table = table.sort_values(["median_abs_rn", "share_beyond"], ascending=False)
    if len(table) and args.worst > 0:
        print("largest median |normalized residual| (a first hint; 'calibra review' diagnoses):")
        print(f"  {'point':<28} {'median':>8} {f'> {RN_SCREEN:g}':>8}")
        for tag, row in table.head(args.worst).iterrows():
            print(f"  {tag:<28} {row['median_abs_rn']:8.1f} {100 * row['share_beyond']:7.0f}%")
    if args.out is not None:
        print(f"results: {len(summary.files)} files in {args.out}")
    return EXIT_OK
