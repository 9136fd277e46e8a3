"""The week review: evidence, per-point classification, crossed points, unverifiable meters,
and device-level conclusions, as a list of :class:`~calibra.diagnosis.findings.Finding`."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from calibra.diagnosis.causes import known_scale_cause
from calibra.diagnosis.classify import ClassifySettings, PointDiagnosis, PointSeries, classify_point
from calibra.diagnosis.describe import build_findings
from calibra.diagnosis.evidence import EvidenceSettings, WeekEvidence, gather_evidence
from calibra.diagnosis.findings import NO_FAULT, DiagnosisKind
from calibra.diagnosis.mismap import (
    QuantityEvaluator,
    best_match,
    own_quantity,
    substation_quantities,
    unit_family,
)
from calibra.diagnosis.model_errors import ModelErrorResult
from calibra.diagnosis.model_review import (
    ModelPassSettings,
    applied,
    corrected_period,
    model_findings,
    note_alternatives,
    note_kept,
    search_model,
)
from calibra.diagnosis.redundancy import not_observable_points, suggest_meters
from calibra.diagnosis.review_summary import ReviewSummary
from calibra.diagnosis.rtu_clock import (
    ClockSettings,
    RtuClock,
    clock_corrected_period,
    clock_findings,
    find_rtu_clocks,
)
from calibra.diagnosis.tap_findings import tap_findings
from calibra.diagnosis.tap_positions import TapSettings
from calibra.diagnosis.tap_review import TapReview, review_taps
from calibra.estimation.block_parts import observability_counts
from calibra.estimation.engine import LocalEngine, PeriodEngine
from calibra.estimation.period import PreparedPeriod, prepare_period
from calibra.estimation.runtime import fork_map
from calibra.model.points import analog_points, class_limit, default_sigma, stated_reporting
from calibra.model.reporting import reading_resolution, reporting_deadband
from calibra.model.site import Site
from calibra.progress import Progress


@dataclass
class ReviewSettings:
    """Everything that tunes a review (saved per site by the application)."""

    evidence: EvidenceSettings = field(default_factory=EvidenceSettings)
    classify: ClassifySettings = field(default_factory=ClassifySettings)
    clock: ClockSettings = field(default_factory=ClockSettings)
    model: ModelPassSettings = field(default_factory=ModelPassSettings)
    taps: TapSettings = field(default_factory=TapSettings)
    #: Full-resolution passes: points found faulty but still in the estimate are set aside and
    #: the period estimated again, until nothing new is set aside.
    max_passes: int = 3


@dataclass
class ReviewResult:
    site_name: str
    period_start: pd.Timestamp
    period_end: pd.Timestamp
    evidence: WeekEvidence
    diagnoses: dict[str, PointDiagnosis]
    findings: list
    summary: ReviewSummary
    #: RTUs whose clock was found wrong; their points were judged with the readings moved
    #: back by the offset (``evidence`` holds those moved readings).
    clocks: list[RtuClock] = field(default_factory=list)
    #: Wrong network parameters the week points to; those no meter error explains as well
    #: are in the network the meters were judged on at last (``evidence.model.network``).
    model_errors: list[ModelErrorResult] = field(default_factory=list)
    #: The rows of the site's model-correction file its network was read with.
    model_corrections: tuple = ()
    #: The verdicts on the site's taps (tap-position points, untelemetered moving taps).
    taps: TapReview = field(default_factory=TapReview)


def period_days(ev: WeekEvidence) -> np.ndarray:
    """The evidence's snapshot times in days from the period's start."""
    return ((ev.index - ev.index[0]).total_seconds() / 86400.0).to_numpy()


def point_series(site: Site, ev: WeekEvidence, t_days: np.ndarray, i: int,
                 sigma: float | None = None) -> PointSeries:
    """What point ``i`` of the evidence is classified on: its measured and implied week, the
    transducer's σ (``sigma``, default from the point list), class limit, and its deadband
    and resolution (stated in the point list, else read from its series). The estimator's
    weights hold the stated storage too; the classification adds it itself, stated or read."""
    model = ev.model
    tag = model.tags[i]
    pt = site.points.loc[tag]
    if sigma is None:
        sigma = float(default_sigma(site.points.loc[[tag]]).iloc[0])
    limit = class_limit(pt)
    sig_y = 0.0
    rep = ev.representative
    if rep is not None and np.isfinite(rep.sigma_implied[i]):
        sig_y = float(rep.sigma_implied[i])
    quantity, ct_ratio = str(pt["quantity"]), str(pt.get("ct_ratio", "") or "")

    def known(factor: float) -> bool:
        return known_scale_cause(factor, quantity, ct_ratio)

    measured = ev.measured[:, i].astype(float)
    # The point list's word where it states them; otherwise read from the series.
    deadband = stated_reporting(pt, "deadband")
    resolution = stated_reporting(pt, "resolution")
    return PointSeries(
        t_days, measured, ev.implied[:, i].astype(float), sigma, limit, sig_y,
        known_factor=known,
        deadband=reporting_deadband(measured) if deadband is None else deadband,
        resolution=reading_resolution(measured) if resolution is None else resolution,
        stated=tuple(c for c, v in (("deadband", deadband), ("resolution", resolution))
                     if v is not None))


def _classify_all(site: Site, ev: WeekEvidence, settings: ClassifySettings) -> dict:
    t_days = period_days(ev)
    sigma = default_sigma(site.points.loc[ev.model.tags]).to_numpy(float)
    # Points are independent: classified on the worker processes where possible.
    found = fork_map(lambda i: classify_point(point_series(site, ev, t_days, i, sigma[i]),
                                              settings),
                     range(ev.model.m))
    return {str(ev.model.tags[i]): d for i, d in enumerate(found)}


def _chunk_t(d: np.ndarray, chunks: int = 24) -> float:
    """t statistic of mean(d) > 0 from chunk means (robust to correlation in time)."""
    if d.size < 4 * chunks:
        return 0.0
    means = np.array([c.mean() for c in np.array_split(d, chunks)])
    sd = means.std(ddof=1)
    return float(means.mean() / (sd / np.sqrt(chunks))) if sd > 0 else float("inf")


def _propagate_device(site: Site, ev: WeekEvidence, diagnoses: dict) -> None:
    """A ratio or polarity error of a device's CT or VT affects its sibling channels too.

    Where one channel of a device is confidently reversed or scaled, every other analog
    channel of the device is tested against the same factor: when z ≈ k·y fits it better than
    z ≈ y in most of 24 time chunks (t statistic above 4), it gets the same diagnosis, even if
    its error alone stays below what its own fit would flag.
    """
    pts = site.points
    tags = ev.model.tags
    for device, group in pts.loc[tags].groupby("device"):
        found = [diagnoses[t] for t in group.index
                 if diagnoses[t].kind in (DiagnosisKind.REVERSED, DiagnosisKind.SCALE)
                 and diagnoses[t].confidence >= 0.9]
        if not found:
            continue
        k = float(np.median([d.params["factor"] for d in found]))
        kind = DiagnosisKind.REVERSED if k < 0 else DiagnosisKind.SCALE
        for tag in group.index:
            d = diagnoses[tag]
            if d.kind != DiagnosisKind.HEALTHY:
                continue
            i = tags.get_loc(tag)
            z, y = ev.measured[:, i].astype(float), ev.implied[:, i].astype(float)
            ok = np.isfinite(z) & np.isfinite(y)
            e0, ek = np.abs(z[ok] - y[ok]), np.abs(z[ok] - k * y[ok])
            if ok.sum() < 200 or ek.mean() >= e0.mean():
                continue
            if _chunk_t(e0 - ek) > 4.0:
                diagnoses[tag] = PointDiagnosis(
                    kind, confidence=float((ek < e0).mean()), n_used=int(ok.sum()),
                    params={"factor": k, "from_device": str(device)},
                    loss_healthy=float(np.median(e0)), loss_model=float(np.median(ek)),
                )


#: A frozen point that reads its own quantity at noise level in at least this share of the
#: week is a meter that froze, never a crossed point (common practice, no source).
STUCK_OWN_SHARE = 0.05


def _mismapped(site: Site, ev: WeekEvidence, diagnoses: dict) -> dict:
    """Check suspicious points against the other quantities of their substation."""
    pts = site.points
    suspicious = [t for t, d in diagnoses.items()
                  if d.kind not in NO_FAULT]
    out: dict[str, dict] = {}
    by_sub: dict[str, list[str]] = {}
    bus_sub = site.network.buses["substation"].astype(str).to_numpy()
    for tag in suspicious:
        # The substation where the point really sits, from the network model.
        sub = bus_sub[ev.model.bus_of_point[ev.model.tags.get_loc(tag)]]
        by_sub.setdefault(sub, []).append(tag)
    vm = ev.period.vm
    va = ev.period.va
    for sub, tags in by_sub.items():
        quantities = substation_quantities(site.network, sub)
        if not quantities:
            continue
        values = QuantityEvaluator(site.network, quantities).evaluate(vm, va, ev.in_service)
        for tag in tags:
            i = ev.model.tags.get_loc(tag)
            z = ev.measured[:, i].astype(float)
            own = own_quantity(pts.loc[tag])
            match = best_match(z, values.astype(float), quantities, own,
                               unit_family(own.quantity))
            d = diagnoses[tag]
            if match is None:
                continue
            sigma = float(ev.model.sigma_pu[i] / ev.model.to_pu[i])
            rival = d.loss_model if np.isfinite(d.loss_model) else d.loss_healthy
            if d.kind == DiagnosisKind.STUCK:
                # The frozen fit is exact on its frozen runs only (loss 0 there); a point that
                # reads another quantity held within its deadband looks frozen against its own.
                # It is compared as with no model, unless it reads its own quantity at noise
                # level anywhere in the week (a meter that froze after it read right).
                y = ev.implied[:, i].astype(float)
                ok = np.isfinite(z) & np.isfinite(y)
                if np.mean(np.abs(z[ok] - y[ok]) < 2.0 * sigma) >= STUCK_OWN_SHARE:
                    continue
                rival = d.loss_healthy
            # Reading another quantity needs no fitted parameter: it wins when it explains the
            # point about as well as the best fault model, at noise level, where the point's
            # own quantity does not.
            standard = (d.kind == DiagnosisKind.REVERSED
                        and abs(d.params.get("factor", 0) + 1) <= 0.1)
            clearly_better = match.loss < 0.5 * rival
            if ((clearly_better or (not standard and match.loss <= 1.1 * rival))
                    and match.loss < 2.0 * sigma and d.loss_healthy > 3.0 * match.loss):
                out[tag] = {"matched": match.quantity.label(), "loss": match.loss,
                            "sign": match.factor, "matched_quantity": match.quantity}
    return out


def _not_observable(ev: WeekEvidence) -> dict[str, dict]:
    """Points that depend on buses no meter determines in the representative snapshot (the
    period's typical pattern), with the meter that would make each observable."""
    rep = ev.representative
    est = rep.estimate
    reporting = np.isfinite(ev.measured).mean(axis=0) >= 0.5
    found = not_observable_points(ev.model, est.observability, reporting & ~ev.set_aside,
                                  est.in_service)
    return {str(ev.model.tags[i]): v for i, v in found.items()}


def review_site(
    site: Site,
    settings: ReviewSettings | None = None,
    period: PreparedPeriod | None = None,
    progress: Progress | None = None,
    engine: PeriodEngine | None = None,
) -> ReviewResult:
    """Review a period of a site (``period``: the values to review, corrections applied,
    prepared once for every pass; default: all the site's snapshots as they are; ``engine``:
    where the estimates run, see :mod:`calibra.estimation.engine`)."""
    st = settings or ReviewSettings()
    period = prepare_period(site) if period is None else period
    ev, diagnoses = _judge(period, st, progress, engine)
    taps, period, ev, diagnoses = review_taps(
        period, ev, diagnoses, lambda p: _judge(p, st, progress, LocalEngine()), st.taps,
        progress)
    clocks = find_rtu_clocks(period, ev, diagnoses, st.clock, st.evidence, progress, engine)
    if clocks:
        # The moved readings exist only here: a cluster's workers read the files as they are.
        period = clock_corrected_period(period, clocks)
        ev, diagnoses = _judge(period, st, progress, LocalEngine())
    model_errors = search_model(period, ev, diagnoses, st.model, progress)
    if applied(model_errors):
        # The meters judged again on the corrected model: those the parameter explains are
        # not blamed, a meter fault elsewhere still is.
        period = corrected_period(period, applied(model_errors))
        site = period.site
        ev, diagnoses = _judge(period, st, progress, LocalEngine())
    _propagate_device(site, ev, diagnoses)
    mismaps = _mismapped(site, ev, diagnoses)
    unverifiable = {}
    rep = ev.representative
    if rep is not None:
        unverifiable.update(_not_observable(ev))
        for i, advice in suggest_meters(site, ev, np.flatnonzero(rep.critical)).items():
            unverifiable[str(ev.model.tags[i])] = advice
    for tag, d in diagnoses.items():
        if d.kind == DiagnosisKind.INSUFFICIENT and tag not in unverifiable:
            i = ev.model.tags.get_loc(tag)
            measured = int(np.isfinite(ev.measured[:, i]).sum())
            need = st.classify.min_snapshots
            why = (f"too little data to judge: {measured:,} snapshots with a value "
                   f"(at least {need:,} needed)" if measured < need else
                   "the network checks it too weakly to judge (its implied value is too "
                   "uncertain)")
            unverifiable[tag] = {"suggestion": "", "reason": why}
    findings = build_findings(site, ev, diagnoses, mismaps, unverifiable)
    findings += clock_findings(clocks)
    note_alternatives(findings, model_errors)
    note_kept(findings, site, period.estimator.model)
    findings += model_findings(site, model_errors)
    findings += tap_findings(site, taps.verdicts, period.index)
    outcomes = ev.period.outcomes
    conv = outcomes["converged"].astype(bool)
    summary = ReviewSummary(
        snapshots=int(len(outcomes)),
        converged=int(conv.sum()),
        chi2_failed=int((~outcomes.loc[conv, "chi2_passed"].astype(bool)).sum()),
        **observability_counts(outcomes),
        estimation_failures=sorted(set(
            outcomes.loc[outcomes["method"] == "failed", "reason"].astype(str))),
        points=int(len(analog_points(site.points))),
        set_aside=int(ev.set_aside.sum()),
        findings=len(findings),
        status_conflicts=[c.describe(site.timezone) for c in ev.status_conflicts],
        rounds=ev.rounds,
        rtu_clocks=[c.rtu for c in clocks],
        model_errors=[f"{r.parameter.label()} ({r.verdict})" for r in model_errors],
        tap_fallbacks=[f.describe() for f in period.tap_fallbacks],
    )
    return ReviewResult(site.name, period.index[0], period.index[-1], ev, diagnoses, findings,
                        summary, clocks, taps=taps, model_errors=model_errors,
                        model_corrections=tuple(site.model_corrections))


def _judge(period: PreparedPeriod, st: ReviewSettings, progress: Progress | None,
           engine: PeriodEngine | None) -> tuple[WeekEvidence, dict[str, PointDiagnosis]]:
    """The evidence and every point's classification, with the full-resolution passes: points
    found faulty but still in the estimate are set aside and the period estimated again."""
    site = period.site
    ev = gather_evidence(period, st.evidence, progress, engine=engine)
    diagnoses = _classify_all(site, ev, st.classify)
    for _ in range(st.max_passes - 1):
        faulty = np.array([diagnoses[str(t)].kind not in NO_FAULT
                           for t in ev.model.tags])
        extra = faulty & ~ev.set_aside
        if not extra.any():
            break
        ev = gather_evidence(period, st.evidence, progress,
                             initial_set_aside=ev.set_aside | extra, screen=False,
                             engine=engine)
        diagnoses = _classify_all(site, ev, st.classify)
    return ev, diagnoses
