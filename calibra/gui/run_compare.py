"""Before and after: the figures of two reviews side by side, free of Qt."""

from __future__ import annotations

from dataclasses import dataclass, field

from calibra.ledger.states import AWAITING_ACTION_STATES
from calibra.review_run import ReviewRun


@dataclass
class RunFigures:
    """The figures of one review an engineer compares."""

    snapshots: int
    converged: int
    chi2_failed_all_in: int | None  #: screening round 1, every point in (sampled snapshots)
    sampled: int | None
    chi2_failed: int  #: full period, suspect points set aside
    set_aside: int
    findings: int
    open_findings: int  #: findings still new or confirmed
    corrections: int
    seconds: float
    finding_ids: set[str] = field(default_factory=set)


def run_figures(run: ReviewRun) -> RunFigures:
    """Figures of one review run."""
    s = run.result.summary
    first = s.rounds[0] if s.rounds else None
    table = run.findings
    open_ = int(table["state"].isin(AWAITING_ACTION_STATES).sum()) if len(table) else 0
    return RunFigures(
        snapshots=int(s.snapshots), converged=int(s.converged),
        chi2_failed_all_in=None if first is None else int(first["chi2_failed"]),
        sampled=None if first is None else int(first["snapshots"]),
        chi2_failed=int(s.chi2_failed), set_aside=int(s.set_aside),
        findings=len(table), open_findings=open_, corrections=len(run.corrections),
        seconds=float(run.seconds), finding_ids=set(table["finding_id"]) if len(table) else set(),
    )


def comparison_rows(before: RunFigures | None, after: RunFigures) -> list[tuple[str, str, str]]:
    """(figure, before, after) rows for display; "" where there is no earlier review."""

    def text(fig: RunFigures | None, attr: str) -> str:
        if fig is None:
            return ""
        value = getattr(fig, attr)
        if attr == "chi2_failed_all_in" and value is not None:
            return f"{value:,} of {fig.sampled:,}"
        if attr == "chi2_failed":
            return f"{value:,} of {fig.converged:,}"
        if attr == "seconds":
            return f"{value:.1f}"
        return "" if value is None else f"{value:,}"

    labels = [
        ("chi2_failed_all_in", "chi-square failures, every point in (sampled)"),
        ("chi2_failed", "chi-square failures, suspects set aside"),
        ("findings", "findings"),
        ("open_findings", "findings still open (new or confirmed)"),
        ("set_aside", "points set aside"),
        ("corrections", "software corrections applied"),
        ("seconds", "review time (s)"),
    ]
    return [(label, text(before, attr), text(after, attr)) for attr, label in labels]


def changed_findings(before: RunFigures, after: RunFigures) -> tuple[list[str], list[str]]:
    """Finding ids gone since the earlier review, and those new in the later one."""
    return (sorted(before.finding_ids - after.finding_ids),
            sorted(after.finding_ids - before.finding_ids))
