"""The figures a review of a period amounts to, as one typed record.

The command line's summary, ``summary.json``, the ledger's review row and the desktop
application read these fields by name; ``summary.json`` writes them in this order.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field


@dataclass
class ReviewSummary:
    """Counts of one review's final estimate of the period and of its screening rounds."""

    snapshots: int  #: snapshots in the period
    converged: int  #: snapshots estimated
    chi2_failed: int  #: estimated snapshots failing the chi-square test, suspects set aside
    partly_observable: int  #: snapshots estimated on part of the network only
    most_buses_not_estimated: int  #: the most buses any of those left out
    not_observable: int  #: snapshots with nothing estimable
    estimation_failures: list[str]  #: distinct reasons of snapshots the estimator failed on
    points: int  #: analog points of the site
    set_aside: int  #: points left out of the final estimate
    findings: int  #: findings of the review
    status_conflicts: list[str] = field(default_factory=list)  #: status points contradicted
    #: Screening rounds: round, snapshots, chi2_failed, suspects and the tags set aside.
    rounds: list[dict] = field(default_factory=list)
    #: RTUs whose clock the review found wrong (their points judged with moved readings).
    rtu_clocks: list[str] = field(default_factory=list)
    #: Network parameters the week points to ("x of branch L7 (model)"; "not_separable" when
    #: meter errors explain the data as well).
    model_errors: list[str] = field(default_factory=list)
    #: Tap-position points that gave no usable step somewhere (the model's tap used there).
    tap_fallbacks: list[str] = field(default_factory=list)

    def as_dict(self, rounds: bool = True) -> dict:
        """The fields as a plain dict in field order (without the rounds when ``rounds`` is
        False, as the ledger keeps it)."""
        out = asdict(self)
        if not rounds:
            del out["rounds"]
        return out
