"""The tap part of a week review: tap-position points and untelemetered moving taps.

After the first judgement of the meters, every tap-position point is compared with the ratio
its transformer's meters imply (:mod:`calibra.diagnosis.tap_positions`); transformers without
tap telemetry are examined only where meters around them were found faulty (a site without
such suspects pays nothing). A faulty tap point or a moving untelemetered tap changes the
ratios the estimate should have used: the period is judged again with the implied ratios in
place, so that the meters around the transformer are not blamed for the tap. An untelemetered
moving tap is kept only when the second judgement clears meters around it.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field, replace

import numpy as np

from calibra.diagnosis.evidence import WeekEvidence
from calibra.diagnosis.findings import NO_FAULT, DiagnosisKind, FindingKind
from calibra.diagnosis.tap_positions import (
    TapSettings,
    TapVerdict,
    factors_from_runs,
    judge_tap_point,
    moving_ratio,
    offset_factors,
)
from calibra.diagnosis.tap_ratios import constant_runs, implied_ratios, neighbour_rows
from calibra.estimation.period import PreparedPeriod
from calibra.estimation.tap_settings import telemetered_steps
from calibra.model.network import branch_status
from calibra.model.points import tap_points
from calibra.model.tap_changers import model_side_ratio, tap_changers
from calibra.progress import Progress

Judge = Callable[[PreparedPeriod], tuple[WeekEvidence, dict]]
#: A meter diagnosis that fits in fewer snapshots than this share is not explained by a single
#: meter error (common practice, no source).
UNEXPLAINED_CONFIDENCE = 0.8


@dataclass
class TapReview:
    """The verdicts on a site's taps (consistent ones included)."""

    verdicts: list[TapVerdict] = field(default_factory=list)

    @property
    def faults(self) -> list[TapVerdict]:
        return [v for v in self.verdicts if v.kind is not None]

    def applied(self, period: PreparedPeriod) -> PreparedPeriod:
        """``period`` with the ratios of the faulty taps replaced by the implied ones."""
        changes = [v for v in self.faults if v.factors is not None]
        if not changes:
            return period
        state = period.in_service.astype(float)
        on = branch_status(period.in_service)
        net = period.site.network
        for v in changes:
            b = int(net.branch_positions([v.branch])[0])
            state[:, b] = np.where(on[:, b], v.factors, 0.0)
        return replace(period, in_service=state)


def suspects_near(ev: WeekEvidence, diagnoses: dict, branch: str) -> int:
    """Points around ``branch`` whose diagnosis is a fault."""
    tags = ev.model.tags
    return sum(diagnoses[str(tags[i])].kind not in NO_FAULT for i in neighbour_rows(ev, branch))


def _telemetered(period: PreparedPeriod, ev: WeekEvidence, st: TapSettings,
                 progress: Progress | None) -> list[TapVerdict]:
    site = period.site
    net = site.network
    changers = tap_changers(net)
    out = []
    for branch, (tag, steps) in telemetered_steps(net, site.points,
                                                  site.snapshots.loc[period.index]).items():
        spec = changers.loc[branch]
        neutral, pct = float(spec["tap_neutral"]), float(spec["tap_step_pct"])
        runs = constant_runs(steps, period.index, st.run_hours, st.min_run)
        ratios = implied_ratios(period, ev, branch, runs, steps, st.per_run, progress)
        kind, fig = judge_tap_point(ratios, neutral, pct, st)
        verdict = TapVerdict(branch, tag, kind, ratios, t_statistic=float(fig.get("t", 0.0)),
                             offset_steps=float(fig.get("offset_steps", np.nan)),
                             slope=float(fig.get("slope", np.nan)))
        model = model_side_ratio(net, branch)
        if kind == FindingKind.TAP_OFFSET:
            verdict.factors = offset_factors(steps, int(verdict.offset_steps), neutral, pct, model)
        elif kind == FindingKind.TAP_FROZEN:
            # A frozen step hides the motion: the ratio is followed chunk by chunk instead.
            fine = constant_runs(steps, period.index, st.unreported_hours, st.min_run)
            fine_ratios = implied_ratios(period, ev, branch, fine, steps, st.per_chunk,
                                         progress) or ratios
            verdict.factors = factors_from_runs(fine_ratios, len(period.index), model)
        elif kind is not None:
            verdict.factors = factors_from_runs(ratios, len(period.index), model)
        out.append(verdict)
    return out


def _unexplained(d) -> bool:
    """A fault diagnosis no single meter error fits well: erratic, or a factor or offset that
    fits in few snapshots (how the meters around a moving tap look)."""
    return d.kind not in NO_FAULT and (d.kind == DiagnosisKind.NOISY
                                       or d.confidence < UNEXPLAINED_CONFIDENCE)


def _candidates(period: PreparedPeriod, ev: WeekEvidence, diagnoses: dict,
                st: TapSettings) -> list[str]:
    """Transformers without tap telemetry with at least ``min_unexplained`` meters around
    them whose faults no single meter error fits well, most first (a week whose faults are
    all clean meter errors examines none)."""
    site = period.site
    br = site.network.branches
    telemetered = set(tap_points(site.points)["element"].astype(str))
    shifted = br["shift_deg"].fillna(0.0).to_numpy(float) != 0
    transformers = br.index[(br["kind"] == "transformer").to_numpy() & ~shifted]
    if not any(_unexplained(d) for d in diagnoses.values()):
        return []
    tags = ev.model.tags
    counts = {b: sum(_unexplained(diagnoses[str(tags[i])]) for i in neighbour_rows(ev, b))
              for b in transformers if b not in telemetered}
    ranked = sorted((b for b, n in counts.items() if n >= st.min_unexplained),
                    key=lambda b: -counts[b])
    return ranked[:st.max_candidates]


def _moving(period: PreparedPeriod, ev: WeekEvidence, branch: str, st: TapSettings,
            progress: Progress | None, keep: np.ndarray) -> tuple[float, float]:
    """How much a ratio per chunk of ``run_hours`` lowers the objective (0 when it does not
    step back and forth), and the significance of its motion."""
    chunks = constant_runs(np.zeros(len(period.index)), period.index, st.run_hours, st.min_run)
    ratios = implied_ratios(period, ev, branch, chunks, None, st.per_run, progress, keep)
    moving, t = moving_ratio(ratios, st)
    return (sum(r.drop for r in ratios) if moving else 0.0), t


def _unreported(period: PreparedPeriod, ev: WeekEvidence, diagnoses: dict, st: TapSettings,
                progress: Progress | None) -> list[TapVerdict]:
    """The untelemetered transformer whose moving ratio explains the most (at most one per
    review: a moving tap disturbs meters around other transformers too)."""
    candidates = _candidates(period, ev, diagnoses, st)
    if not candidates:
        return []
    # One measurement set for every candidate's fits: their objective drops compare.
    keep = np.unique(np.concatenate([neighbour_rows(ev, b) for b in candidates]))
    scored = [(b, *_moving(period, ev, b, st, progress, keep)) for b in candidates]
    scored = [s for s in scored if s[1] > 0]
    if not scored:
        return []
    branch, _, t = max(scored, key=lambda s: s[1])
    k = len(period.index)
    fine = constant_runs(np.zeros(k), period.index, st.unreported_hours, st.min_run)
    fine_ratios = implied_ratios(period, ev, branch, fine, None, st.per_chunk, progress, keep)
    if len(fine_ratios) < 2:
        return []
    factors = factors_from_runs(fine_ratios, k, model_side_ratio(period.site.network, branch))
    return [TapVerdict(branch, "", FindingKind.TAP_UNREPORTED, fine_ratios, t_statistic=t,
                       factors=factors)]


def review_taps(period: PreparedPeriod, ev: WeekEvidence, diagnoses: dict, judge: Judge,
                settings: TapSettings | None = None, progress: Progress | None = None
                ) -> tuple[TapReview, PreparedPeriod, WeekEvidence, dict]:
    """The tap verdicts, and the period, evidence and diagnoses the rest of the review uses
    (judged again with the implied ratios where a tap was found wrong or moving)."""
    st = settings or TapSettings()
    verdicts = _telemetered(period, ev, st, progress)
    unreported = _unreported(period, ev, diagnoses, st, progress)
    review = TapReview(verdicts + unreported)
    if not review.faults:
        return review, period, ev, diagnoses
    tapped = review.applied(period)
    ev2, diag2 = judge(tapped)
    faults_before, faults_after = (sum(d.kind not in NO_FAULT for d in dd.values())
                                   for dd in (diagnoses, diag2))
    cleared = [v for v in unreported
               if suspects_near(ev2, diag2, v.branch) < suspects_near(ev, diagnoses, v.branch)
               and faults_after < faults_before]
    if len(cleared) == len(unreported):
        return review, tapped, ev2, diag2
    review = TapReview(verdicts + cleared)
    if not review.faults:
        return review, period, ev, diagnoses
    tapped = review.applied(period)
    ev2, diag2 = judge(tapped)
    return review, tapped, ev2, diag2
