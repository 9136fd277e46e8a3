"""``calibra estimate SITE``: estimate every snapshot and summarise the outcome."""

from __future__ import annotations

import argparse
import time
from pathlib import Path

import numpy as np

from calibra.cli import EXIT_OK, EXIT_UNUSABLE, load_for_command, parse_period, period_arguments
from calibra.estimation.model import MeasurementModel
from calibra.estimation.site_estimate import checked_topology
from calibra.estimation.week import estimate_period
from calibra.estimation.wls import Estimator
from calibra.model.availability import availability_lines
from calibra.progress import terminal_progress


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("site", type=Path, help="the site folder")
    period_arguments(parser)
    parser.add_argument("--confidence", type=float, default=0.99,
                        help="confidence level of the chi-square test (default 0.99)")
    parser.add_argument("--worst", type=int, default=10,
                        help="how many points with the largest normalized residuals to list")


def run(args: argparse.Namespace) -> int:
    site = load_for_command(args.site, args.start, args.end)
    if site is None:
        return EXIT_UNUSABLE
    start, end = parse_period(site, args)
    snaps = site.snapshots.loc[start:end]
    if snaps.empty:
        print("result: no snapshots in the period")
        return EXIT_UNUSABLE
    for line in availability_lines(site):
        print(line)
    model = MeasurementModel.from_points(site.network, site.points)
    z = model.to_per_unit(snaps.reindex(columns=model.tags).to_numpy(float))
    t0 = time.perf_counter()
    status, conflicts = checked_topology(site, snaps)
    for conflict in conflicts:
        print(f"status point contradicted: {conflict.describe(site.timezone)}")
    period = estimate_period(Estimator(model), z, status, snaps.index,
                             confidence=args.confidence, progress=terminal_progress())
    elapsed = time.perf_counter() - t0
    out = period.outcomes
    conv = out["converged"].astype(bool)
    k = len(out)
    print(f"estimated {k} snapshots in {elapsed:.1f} s ({1e3 * elapsed / k:.2f} ms each)")
    print(f"converged: {int(conv.sum())} ({100 * conv.mean():.1f}%); "
          f"in blocks {int((out['method'] == 'block').sum())}, "
          f"alone {int((out['method'] == 'single').sum())}")
    failed = (~out.loc[conv, "chi2_passed"].astype(bool)).sum()
    print(f"chi-square test at {100 * args.confidence:g}%: failed in {int(failed)} of "
          f"{int(conv.sum())} converged snapshots ({100 * failed / max(conv.sum(), 1):.1f}%)")
    partial = (~out["observable"].astype(bool)).sum()
    if partial:
        print(f"not fully observable: {int(partial)} snapshots")
    for reason, count in out.loc[~conv, "reason"].value_counts().items():
        print(f"  not converged ({count}): {reason}")
    with np.errstate(divide="ignore", invalid="ignore"):
        rn = np.abs(period.residual) / np.sqrt(period.omega)
    med = np.nanmedian(np.where(np.isfinite(rn), rn, np.nan), axis=0) if k else np.array([])
    order = [i for i in np.argsort(-np.nan_to_num(med, nan=-1.0)) if np.isfinite(med[i])]
    if order and args.worst > 0:
        print("largest median normalized residuals (a first hint; 'calibra review' diagnoses):")
        for i in order[: args.worst]:
            print(f"  {model.tags[i]:<28} {med[i]:8.1f}")
    return EXIT_OK
