"""Wrong network parameters behind a week's consistent residuals (the review's model pass,
:mod:`calibra.diagnosis.model_review`).

From a finished week evidence: a sample of the week's converged snapshots, at the evidence's
own states (the points not set aside); branch parameters near points with large consistent
residuals are screened by their normalized Lagrange multipliers
(:mod:`calibra.estimation.parameter_screening`); the strongest is estimated jointly with the
sample's states and compared with the best one or two meter errors around it
(:mod:`calibra.estimation.meter_or_model`). An accepted parameter is put into the model and the
search repeated, up to a few errors. Each result names the parameter, the model's and the
estimated value with its standard deviation, the points whose consistent residuals it explains,
and — where a meter error explains the data as well — that meter and the meter that would
separate them. Findings are advisory: the model owner checks the datasheet, nameplate or tap
position before the model is changed.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from calibra.diagnosis.evidence import WeekEvidence
from calibra.estimation.measurement_model import MeasurementModel
from calibra.estimation.measurements import BRANCH_END_CODES
from calibra.estimation.meter_or_model import (
    AddedMeter,
    MeterOrModel,
    Verdict,
    meter_or_model,
    separating_meters,
)
from calibra.estimation.parameter_screening import (
    candidate_parameters,
    disagreeing_places,
    meter_terms_around,
    screen_terms,
)
from calibra.estimation.parameter_terms import MeterError, TermModel, snapshot_residuals
from calibra.estimation.parameters import (
    SnapshotSample,
    sample_from_estimates,
    sample_from_states,
    spread_positions,
)
from calibra.estimation.wls import Estimator
from calibra.model.parameters import NetworkParameter, ParameterKind, with_parameters
from calibra.model.points import (
    ENDS,
    FLOW_QUANTITIES,
    INJECTION_QUANTITIES,
    end_place,
    quantity_words,
)
from calibra.progress import Progress


@dataclass
class ModelErrorSettings:
    """How the search for wrong parameters samples and judges the week."""

    sample_snapshots: int = 16  #: snapshots spread over the period
    residual_threshold: float = 3.0  #: median |r|/σ that makes a point's residual consistent
    multiplier_threshold: float = 5.0  #: normalized multiplier worth a joint fit
    max_candidates: int = 200  #: parameters screened per round
    tried_per_round: int = 3  #: strongest candidates fitted per round
    max_errors: int = 3
    #: Rounds of screening and comparisons (a round whose candidates all turn out to be meter
    #: errors hands on to the next candidates).
    max_rounds: int = 6
    confidence: float = 0.99
    #: Distinct places (branch ends, bus injections, bus voltages) around a parameter whose
    #: meters must disagree for it to be screened: one meter's or one CT's error disagrees at
    #: its own place only, and is left to the meter judging (common practice, no source).
    min_places: int = 2
    #: A meter error around the parameter whose normalized multiplier is more than this many
    #: times the parameter's explains the data better: the joint fit is skipped (as the
    #: largest normalized residual points to a bad reading; common practice, no source).
    meter_margin: float = 2.0


@dataclass
class ModelErrorResult:
    """One wrong parameter the week's meters point to (advisory)."""

    parameter: NetworkParameter
    model_value: float
    estimated_value: float
    std: float
    confidence: float  # 0–1, see :func:`find_model_errors`
    verdict: Verdict
    multiplier: float  # normalized Lagrange multiplier of the model's value
    objective_before: float
    objective_after: float
    snapshots: int
    explained: list[str]  # points whose consistent residual the parameter explains
    alternative: list[str]  # meters whose errors explain the data as well (not separable)
    separating_meter: str  # the meter that would tell them apart ('' when separable)
    evidence: str
    comparison: MeterOrModel | None = field(default=None, repr=False)

    @property
    def element(self) -> str:
        return self.parameter.element

    @property
    def kind(self) -> ParameterKind:
        return self.parameter.kind


def _consistent(residuals: np.ndarray, threshold: float) -> np.ndarray:
    """Rows whose median |weighted residual| over the sample exceeds ``threshold``, strongest
    first."""
    seen = np.isfinite(residuals).sum(axis=0) >= max(3, residuals.shape[0] // 4)
    med = np.full(residuals.shape[1], np.nan)
    med[seen] = np.nanmedian(np.abs(residuals[:, seen]), axis=0)
    rows = np.flatnonzero(np.nan_to_num(med) > threshold)
    return rows[np.argsort(-med[rows])]


def _meter_words(model: MeasurementModel, meter: AddedMeter) -> str:
    net = model.network
    if meter.codes[0] in BRANCH_END_CODES:
        branch = str(net.branches.index[meter.element])
        place = end_place(net.buses, net.branches, branch, ENDS[meter.end])
        return f"a meter of the {quantity_words(FLOW_QUANTITIES, branch, place)}"
    bus = str(net.buses.index[meter.element])
    return f"a meter of the {quantity_words(INJECTION_QUANTITIES, bus)}"


def _with_network(estimator: Estimator, values: dict[NetworkParameter, float]) -> Estimator:
    model = estimator.model
    net = with_parameters(model.network, values)
    moved = replace(model, network=net, functions=model.functions.on_network(net),
                    constraints=model.constraints.on_network(net))
    return Estimator(moved, estimator.options)


def _fmt(value: float, kind: ParameterKind) -> str:
    unit = {ParameterKind.SHIFT: "°", ParameterKind.SHUNT: " Mvar", ParameterKind.TAP: ""}
    return f"{value:.5g}{unit.get(kind, ' pu')}"


def _result(estimator: Estimator, sample: SnapshotSample, cmp: MeterOrModel,
            multiplier: float, threshold: float) -> ModelErrorResult:
    """Words and figures of one accepted comparison."""
    model = estimator.model
    est = cmp.estimate
    tm = TermModel(model, [est.parameter])
    before = snapshot_residuals(tm, sample.snapshots, np.array([est.model_value]))
    after = snapshot_residuals(tm, cmp.joint.snapshots, np.array([est.estimated_value]))
    was = set(_consistent(before, threshold).tolist())
    still = set(_consistent(after, threshold).tolist())
    explained = [str(model.tags[i]) for i in sorted(was - still)]
    # Confidence: the share of snapshots the estimated value fits better than the model's
    # (halved when a meter error fits as well).
    better = float(np.mean(np.nansum(after ** 2, axis=1) < np.nansum(before ** 2, axis=1)))
    alternative, separating = [], ""
    p = est.parameter
    change = est.estimated_value - est.model_value
    words = (f"the {p.label()}: the model holds {_fmt(est.model_value, p.kind)}, the week's "
             f"meters fit {_fmt(est.estimated_value, p.kind)} ± {_fmt(est.std, p.kind)}")
    if p.kind not in (ParameterKind.TAP, ParameterKind.SHIFT) and est.model_value:
        words += f" ({100 * change / est.model_value:+.0f} %)"
    words += (f"; objective of {est.snapshots} snapshots {est.objective_before:,.0f} → "
              f"{est.objective_after:,.0f}")
    if cmp.verdict == Verdict.NOT_SEPARABLE and cmp.best is not None:
        alternative = sorted({str(model.tags[r]) for m in cmp.best.meters for r in m.rows})
        meters = separating_meters(estimator, cmp)
        useful = [m for m in meters if m.expected_gain > 4 * cmp.threshold]
        separating = _meter_words(model, useful[0]) if useful else ""
        words += (f"; errors of {', '.join(alternative)} explain it as well"
                  + (f" — {separating} would tell them apart" if separating else ""))
        better *= 0.5
    else:
        words += "; no one or two meter errors around it explain it"
    return ModelErrorResult(p, est.model_value, est.estimated_value, est.std, better,
                            cmp.verdict, multiplier, est.objective_before, est.objective_after,
                            est.snapshots, explained, alternative, separating, words, cmp)


def find_model_errors(evidence: WeekEvidence, estimator: Estimator,
                      settings: ModelErrorSettings | None = None,
                      progress: Progress | None = None,
                      settled: frozenset[NetworkParameter] = frozenset()
                      ) -> list[ModelErrorResult]:
    """Wrong parameters of the network model that the week's consistent residuals point to.

    ``estimator``: the review's (its model is the evidence's). The points the evidence set
    aside as suspect stay out of the search (gross meter errors would bend any parameter fitted
    beside them) except those a candidate branch's parameter acts on directly (its flows and
    currents, the injections and voltages at its buses): a wrong parameter makes exactly those
    look faulty, and the comparison with meter errors decides which it is. Set-aside points that
    an accepted parameter explains (median |r|/σ then at most the residual threshold) are
    listed as explained and join the search for the next parameter. ``settled``: parameters
    the model's owner checked and keeps as they are (never offered).
    """
    st = settings or ModelErrorSettings()
    model = evidence.model
    z = model.to_per_unit(evidence.measured.astype(float))
    ins = evidence.in_service
    available = ~np.asarray(evidence.set_aside, bool)
    # The sample starts from the evidence's own estimates (the same points: those not set
    # aside), spread over its converged snapshots: no snapshot is estimated again for it.
    result = evidence.period
    converged = np.flatnonzero(result.outcomes["converged"].to_numpy(bool))
    positions = converged[spread_positions(converged.size, st.sample_snapshots)]
    base = sample_from_states(estimator, z, ins, result.vm, result.va, positions, available)
    found: list[ModelErrorResult] = []
    done: set[NetworkParameter] = set(settled)
    #: Elements around which meter errors explained the data better than a parameter: their
    #: other parameters are not fitted again until the model changes.
    by_meters: set[str] = set()
    #: Samples with set-aside points re-admitted, and their screened candidates, while the
    #: model stays as it is (a round that accepts nothing changes neither).
    cache: dict[tuple[int, ...], tuple[SnapshotSample, dict]] = {}
    for _ in range(st.max_rounds):
        if not len(base) or len(found) >= st.max_errors:
            break
        residuals = snapshot_residuals(TermModel(estimator.model, []), base.snapshots,
                                       np.zeros(0))
        rows = np.r_[_consistent(residuals, st.residual_threshold), np.flatnonzero(~available)]
        cands = [c for c in candidate_parameters(estimator.model, rows, st.max_candidates)
                 if c not in done and c.element not in by_meters
                 and disagreeing_places(estimator.model, c, rows) >= st.min_places]
        screened = []
        for readmit, params in _by_readmitted(estimator.model, cands, available).items():
            if readmit not in cache:
                cache[readmit] = (base if not readmit else sample_from_estimates(
                    estimator, z, ins, positions, available | _mask(model.m, readmit),
                    starts=base), {})
            sample, known = cache[readmit]
            new = [p for p in params if p not in known]
            if new:  # each term's multiplier is its own (diagonal): screened once per model
                got = {s.term: s for s in screen_terms(estimator.model, sample.snapshots, new)}
                known.update({p: got.get(p) for p in new})
            screened += [(known[p], sample, readmit) for p in params if known[p] is not None]
        screened.sort(key=lambda item: -abs(item[0].multiplier))
        accepted = None
        strong = [x for x in screened if abs(x[0].multiplier) > st.multiplier_threshold]
        if not strong:
            break
        tried = 0
        for s, sample, readmit in strong:
            if tried >= st.tried_per_round:
                break
            if s.term.element in by_meters:
                continue
            tried += 1
            done.add(s.term)
            around = screen_terms(estimator.model, sample.snapshots,
                                  meter_terms_around(estimator.model, s.term))
            best_meter = max((abs(m.multiplier) for m in around), default=0.0)
            if best_meter > st.meter_margin * abs(s.multiplier):
                by_meters.add(s.term.element)  # a meter error stands out: no joint fit
                continue
            cmp = meter_or_model(estimator, sample, s.term, st.confidence, progress=progress)
            if cmp.verdict == Verdict.METER or not cmp.estimate.converged:
                by_meters.add(s.term.element)
                continue
            result = _result(estimator, sample, cmp, abs(s.multiplier), st.residual_threshold)
            moved = _with_network(estimator, {result.parameter: result.estimated_value})
            seen = available | _mask(model.m, readmit)
            cleared = _explained_set_aside(moved, z, ins, cmp.joint, seen,
                                           st.residual_threshold)
            if not result.explained and not cleared.size:
                continue  # it explains no meter's consistent disagreement: not a finding
            result.explained = sorted(set(result.explained)
                                      | {str(model.tags[i]) for i in cleared})
            accepted, estimator, available = result, moved, seen
            break
        if accepted is None:
            continue  # every candidate tried was a meter error: the next ones
        joint = accepted.comparison.joint
        found.append(accepted)
        # The model changed: candidates judged meter errors beside it are judged again.
        done = {r.parameter for r in found} | set(settled)
        by_meters, cache = set(), {}
        available = available.copy()
        available[cleared] = True
        base = sample_from_states(estimator, z, ins, _states(joint, z.shape[0], "vm"),
                                  _states(joint, z.shape[0], "va"),
                                  [s.position for s in joint.snapshots], available)
    return found


def _mask(m: int, rows: tuple[int, ...]) -> np.ndarray:
    out = np.zeros(m, bool)
    out[list(rows)] = True
    return out


def _by_readmitted(model: MeasurementModel, params: list[NetworkParameter],
                   available: np.ndarray) -> dict[tuple[int, ...], list[NetworkParameter]]:
    """Candidates grouped by the set-aside points they act on directly (re-admitted to test
    them)."""
    groups: dict[tuple[int, ...], list[NetworkParameter]] = {}
    rows_of: dict[str, tuple[int, ...]] = {}
    for p in params:
        if p.element not in rows_of:
            touched = {r for t in meter_terms_around(model, p, (MeterError.OFFSET,))
                       for r in t.rows}
            rows_of[p.element] = tuple(sorted(r for r in touched if not available[r]))
        groups.setdefault(rows_of[p.element], []).append(p)
    return groups


def _states(sample: SnapshotSample, k: int, which: str) -> np.ndarray:
    """The sample's states as a k × n array (NaN for snapshots not in the sample)."""
    n = sample.snapshots[0].vm.size
    out = np.full((k, n), np.nan)
    for s in sample.snapshots:
        out[s.position] = getattr(s, which)
    return out


def _explained_set_aside(estimator: Estimator, z: np.ndarray, in_service: np.ndarray,
                         joint: SnapshotSample, available: np.ndarray,
                         threshold: float) -> np.ndarray:
    """Points set aside whose readings agree with the joint estimate (median |z − h|/σ at most
    ``threshold`` over the sample): the corrected parameter explains them."""
    aside = np.flatnonzero(~available)
    if aside.size == 0 or not len(joint):
        return aside
    model = estimator.model
    res = np.full((len(joint), aside.size), np.nan)
    for k, s in enumerate(joint.snapshots):
        h = model.functions.evaluate(s.vm, s.va, s.in_service)[aside]
        res[k] = (z[s.position, aside] - h) / model.sigma_pu[aside]
    seen = np.isfinite(res).sum(axis=0) >= max(3, len(joint) // 4)
    med = np.full(aside.size, np.inf)
    med[seen] = np.nanmedian(np.abs(res[:, seen]), axis=0)
    return aside[med <= threshold]
