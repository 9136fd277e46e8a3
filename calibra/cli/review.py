"""``calibra review SITE --out DIR``: the week review from the command line."""

from __future__ import annotations

import argparse
from dataclasses import replace
from pathlib import Path

from calibra.cli.common import (
    EXIT_OK,
    EXIT_UNUSABLE,
    UsageError,
    load_for_command,
    period_arguments,
    read_period,
)
from calibra.cluster import ClusterError, parse_cluster_address
from calibra.diagnosis.review import ReviewSettings
from calibra.ledger import Ledger, LedgerError
from calibra.progress import terminal_progress
from calibra.review_run import OUTPUT_LABELS, run_review, summary_lines, write_outputs


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("site", type=Path, help="the site folder")
    parser.add_argument("--out", type=Path, default=None,
                        help="folder for findings.csv, work orders and the summary "
                             "(default: ./calibra-review)")
    period_arguments(parser)
    parser.add_argument("--threshold", type=float, default=None,
                        help="normalized-residual threshold for suspects (default 3.0)")
    parser.add_argument("--confidence", type=float, default=None,
                        help="confidence level of the chi-square test (default 0.99)")
    parser.add_argument("--min-snapshots", type=int, default=None,
                        help="fewest snapshots a point needs to be judged (default 120)")
    parser.add_argument("--ledger", type=Path, default=None,
                        help="ledger file (default: calibra-ledger.sqlite in the site folder)")
    parser.add_argument("--no-ledger", action="store_true",
                        help="do not read or write the ledger (no corrections applied)")
    parser.add_argument("--no-pdf", action="store_true", help="skip the PDF work orders")
    # Optional extra calibra[cluster]: estimate day by day on Dask workers (calibra/cluster/).
    parser.add_argument("--cluster", metavar="ADDRESS", default=None,
                        help="estimate on a Dask cluster: a scheduler address "
                             "(tcp://HOST:PORT) or local:N for N worker processes here")
    parser.add_argument("--worker-site", metavar="PATH", default=None,
                        help="with --cluster: the site folder as the workers see it, a path or "
                             "a URL such as s3://bucket/site (default: this folder's path)")


def _settings(args: argparse.Namespace) -> ReviewSettings:
    st = ReviewSettings()
    if args.threshold is not None:
        if args.threshold <= 0:
            raise UsageError("--threshold must be positive")
        st.evidence = replace(st.evidence, normalized_threshold=args.threshold)
    if args.confidence is not None:
        if not 0.5 < args.confidence < 1.0:
            raise UsageError("--confidence must be between 0.5 and 1")
        st.evidence = replace(st.evidence, confidence=args.confidence)
    if args.min_snapshots is not None:
        if args.min_snapshots < 10:
            raise UsageError("--min-snapshots must be at least 10")
        st.classify = replace(st.classify, min_snapshots=args.min_snapshots)
    return st


def _check_cluster_options(args: argparse.Namespace) -> None:
    if args.cluster is None:
        if args.worker_site is not None:
            raise UsageError("--worker-site needs --cluster")
        return
    try:
        parse_cluster_address(args.cluster)
    except ValueError as exc:
        raise UsageError(f"--cluster: {exc}") from None


def _review(args: argparse.Namespace, site, settings, start, end, ledger):
    """The review here, or on the cluster named by --cluster."""
    progress = terminal_progress()
    if args.cluster is None:
        return run_review(site, settings, start, end, ledger, progress)
    from calibra.cluster import ClusterEngine, cluster_client

    with cluster_client(args.cluster) as client:
        engine = ClusterEngine(client, args.worker_site, progress)
        return run_review(site, settings, start, end, ledger, progress, engine=engine)


def _pdf_writer(review):
    """The desktop layer's PDF printer, or None (with a note) when Qt is not installed."""
    import importlib.util

    if importlib.util.find_spec("PySide6") is None:
        review.notes.append("PySide6 is not installed: work orders written as CSV only")
        return None
    from calibra.gui.qt_pdf import sheets_to_pdf

    return sheets_to_pdf


def run(args: argparse.Namespace) -> int:
    settings = _settings(args)
    _check_cluster_options(args)
    start, end = read_period(args.site, args)
    site = load_for_command(args.site, start, end)
    if site is None:
        return EXIT_UNUSABLE
    out = args.out or Path("calibra-review")
    ledger = None
    if not args.no_ledger:
        try:
            ledger = Ledger(args.ledger) if args.ledger else Ledger.for_site(args.site)
        except (LedgerError, OSError) as exc:
            print(f"ledger: {exc}")
            return EXIT_UNUSABLE
    try:
        try:
            review = _review(args, site, settings, start, end, ledger)
        except ValueError as exc:
            print(f"result: {exc}")
            return EXIT_UNUSABLE
        except ClusterError as exc:  # no workers, a worker that reads other data, ...
            print(f"cluster: {exc}")
            return EXIT_UNUSABLE
        files = write_outputs(review, site, out, pdf_writer=None if args.no_pdf else
                              _pdf_writer(review))
    finally:
        if ledger is not None:
            ledger.close()
    for line in summary_lines(review, site):
        print(line)
    for note in review.notes:
        print(f"note: {note}")
    for name, path in files.items():
        print(f"wrote {OUTPUT_LABELS.get(name, name)}: {path}")
    return EXIT_OK
