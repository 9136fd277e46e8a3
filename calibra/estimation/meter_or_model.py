"""Meter or model? One parameter error against constant errors of the meters around it, and
the meter one would add to tell them apart.

A wrong reactance on a branch metered at one end only changes that end's readings exactly as a
wrong CT ratio there would (S ∝ 1/x when r and b are small): the metering cannot say which.
The comparison fits both explanations on the same sample with the Schur-complement machinery
of :mod:`calibra.estimation.parameter_terms` and judges the objective drops by chi-square
(likelihood-ratio logic for nested hypotheses, common practice); where neither explains beyond
the other, it says so and ranks the meters not installed nearby by how much they would let the
parameter show.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from enum import StrEnum

import numpy as np
import pandas as pd

from calibra.estimation.measurement_model import MeasurementModel
from calibra.estimation.measurements import (
    BRANCH_END_CODES,
    P_FLOW,
    P_INJ,
    Q_FLOW,
    Q_INJ,
    MeasurementFunctions,
)
from calibra.estimation.parameter_screening import (
    conditional_information,
    meter_terms_around,
    subset_drop,
)
from calibra.estimation.parameter_terms import MeterTerm, Term, TermModel, schur_terms
from calibra.estimation.parameters import (
    ParameterEstimate,
    SnapshotSample,
    estimate_parameter,
)
from calibra.estimation.residuals import chi_square_threshold
from calibra.estimation.wls import Estimator
from calibra.model.parameters import NetworkParameter
from calibra.progress import Progress


class Verdict(StrEnum):
    """What explains a candidate's consistent residuals."""

    MODEL = "model"  #: the parameter, better than any meter error around it
    METER = "meter"  #: meter errors around it, better than the parameter
    NOT_SEPARABLE = "not separable"  #: either, equally well, with the metering there is


@dataclass(frozen=True)
class MeterAlternative:
    """Constant errors of one or two meters in place of the parameter error."""

    meters: tuple[MeterTerm, ...]
    objective: float  # J with these meter errors fitted (the model's parameter value)
    parameter_gain: float  # J_M − J_{p+M}: what the parameter explains beyond these meters
    meter_gain: float  # J_p − J_{p+M}: what these meters explain beyond the parameter


@dataclass
class MeterOrModel:
    """The comparison of one parameter error against the best meter errors around it."""

    estimate: ParameterEstimate
    objective_model: float  # J with the model's value and no meter error
    alternatives: list[MeterAlternative]  # best (lowest objective) first
    verdict: Verdict
    threshold: float  # χ²(1) at the confidence used
    joint: SnapshotSample = field(repr=False, default=None)  # the states of the joint fit

    @property
    def best(self) -> MeterAlternative | None:
        return self.alternatives[0] if self.alternatives else None


def copy_sample(sample: SnapshotSample) -> SnapshotSample:
    """A copy whose states can be changed without touching the original's."""
    return SnapshotSample([replace(s, vm=s.vm.copy(), va=s.va.copy()) for s in sample.snapshots],
                          dict(sample.skipped))


#: Single meter errors kept for the pairs of two.
PAIR_FROM = 6


def meter_or_model(estimator: Estimator, sample: SnapshotSample, parameter: NetworkParameter,
                   confidence: float = 0.99, estimate: ParameterEstimate | None = None,
                   progress: Progress | None = None) -> MeterOrModel:
    """Compare "the parameter is wrong" with "one or two meters around it have a constant
    scale or offset error" on the sample (at its ordinary estimates; not changed).

    Objectives: J₀ (model as it is), J_p (parameter fitted, jointly and exactly), J_M (meter
    errors M fitted: one linear step from J₀, exact for errors linear in the meter's value up
    to the states' linearization) and J_{p+M} (M fitted in addition to the parameter, one step
    from the joint estimate). The meters are the explanation when the best alternative's J_M
    is below J_p by more than χ²(|M|); else the parameter, when J_M − J_{p+M} exceeds χ²(1)
    for every alternative M (it explains what no meter pair does); otherwise the two cannot be
    told apart."""
    model = estimator.model
    used = np.unique(np.concatenate([s.rows for s in sample.snapshots])) if len(sample) else []
    used = set(int(i) for i in used)
    meters = [t for t in meter_terms_around(model, parameter, ring=True)
              if set(t.rows) & used]
    tm = TermModel(model, [parameter, *meters])
    start = copy_sample(sample)
    st0 = schur_terms(tm, start.snapshots, tm.model_values)
    joint = copy_sample(sample)
    if estimate is None:
        estimate = estimate_parameter(estimator, joint, parameter, progress=progress)
    else:
        estimate_parameter(estimator, joint, parameter, progress=progress)
    theta = tm.model_values.copy()
    theta[0] = estimate.estimated_value
    st1 = schur_terms(tm, joint.snapshots, theta)
    j0, jp = st0.objective, st1.objective
    thr = float(chi_square_threshold(confidence, 1))
    alternatives = []
    drops = [subset_drop(st0.q, st0.sigma, [i]) for i in range(1, len(meters) + 1)]
    order = list(np.argsort(drops)[::-1][:PAIR_FROM] + 1)
    subsets = [(i,) for i in range(1, len(meters) + 1)]
    subsets += [(a, b) for n, a in enumerate(order) for b in order[n + 1:]]
    for sub in subsets:
        jm = j0 - subset_drop(st0.q, st0.sigma, sub)
        jpm = jp - subset_drop(st1.q, st1.sigma, (0, *sub))
        alternatives.append(MeterAlternative(tuple(meters[i - 1] for i in sub), jm,
                                             jm - jpm, jp - jpm))
    alternatives.sort(key=lambda a: a.objective)
    best = alternatives[0] if alternatives else None
    if best is not None and best.objective < jp - float(
            chi_square_threshold(confidence, len(best.meters))):
        verdict = Verdict.METER  # meter errors explain clearly more than the parameter
    elif best is None or min(a.parameter_gain for a in alternatives) > thr:
        verdict = Verdict.MODEL
    else:
        verdict = Verdict.NOT_SEPARABLE
    return MeterOrModel(estimate, j0, alternatives, verdict, thr, joint)


def with_extra_rows(model: MeasurementModel, code, element, end, sigma_pu) -> MeasurementModel:
    """The measurement model with rows added (meters one could install; per-unit, no tags of
    a point list): the rows' structure, σ and h, for what they would tell."""
    funcs = model.functions
    code, element, end = (np.asarray(a, np.int64) for a in (code, element, end))
    extended = MeasurementFunctions(model.network, np.r_[funcs.code, code],
                                    np.r_[funcs.element, element], np.r_[funcs.end, end])
    n = code.size
    tags = model.tags.append(pd.Index([f"(added {j})" for j in range(n)]))
    return replace(model, tags=tags, functions=extended, to_pu=np.r_[model.to_pu, np.ones(n)],
                   sigma_pu=np.r_[model.sigma_pu, np.asarray(sigma_pu, float)],
                   bus_of_point=np.r_[model.bus_of_point, np.zeros(n, np.int64)])


def information_with_rows(model: MeasurementModel, sample: SnapshotSample,
                          terms: list[Term], theta: np.ndarray, code, element, end,
                          sigma_pu) -> np.ndarray:
    """Σ of ``terms`` over the sample with meters added in every snapshot (their values taken
    equal to the model's at the states: Σ depends on the rows, not on what they read)."""
    extended = with_extra_rows(model, code, element, end, sigma_pu)
    m = model.m
    added = np.arange(m, extended.m)
    snaps = []
    for s in sample.snapshots:
        z = np.r_[s.z, extended.functions.evaluate(s.vm, s.va, s.in_service)[added]]
        snaps.append(replace(s, z=z, rows=np.r_[s.rows, added]))
    st = schur_terms(TermModel(extended, terms), snaps, theta)
    return st.sigma


@dataclass(frozen=True)
class AddedMeter:
    """A meter one could install: P and Q at a branch end or a bus (positions, codes)."""

    codes: tuple[int, ...]
    element: int  # branch position (flows) or bus position (injections)
    end: int  # 0 from, 1 to; 0 for a bus
    expected_gain: float = 0.0  # what it would let the parameter explain beyond the meters


def unmetered_around(model: MeasurementModel, parameter: NetworkParameter) -> list[AddedMeter]:
    """P/Q meters not in the model at either end of the parameter's branch and at the
    injections of its two buses (zero-injection buses need none)."""
    funcs, net = model.functions, model.network
    metered = {(int(c), int(e), int(d) if c in BRANCH_END_CODES else 0)
               for c, e, d in zip(funcs.code, funcs.element, funcs.end, strict=True)}
    zero = net.buses["zero_injection"].to_numpy(bool)
    out = []
    if parameter.on_bus:
        buses = list(net.bus_positions([parameter.element]))
    else:
        e = int(net.branch_positions([parameter.element])[0])
        adm = net.branch_admittances(np.ones(net.n_branch, bool))
        buses = [int(adm.f[e]), int(adm.t[e])]
        for end in (0, 1):
            if (P_FLOW, e, end) not in metered or (Q_FLOW, e, end) not in metered:
                out.append(AddedMeter((P_FLOW, Q_FLOW), e, end))
    for b in buses:
        if not zero[b] and ((P_INJ, b, 0) not in metered or (Q_INJ, b, 0) not in metered):
            out.append(AddedMeter((P_INJ, Q_INJ), int(b), 0))
    return out


def separating_meters(estimator: Estimator, comparison: MeterOrModel) -> list[AddedMeter]:
    """The meters of :func:`unmetered_around`, each with the objective gain it would let the
    estimated parameter error show beyond the best meter alternative (Δp² × the information
    on p that those meter errors cannot also explain), best first."""
    model = estimator.model
    best = comparison.best
    est = comparison.estimate
    if best is None or comparison.joint is None:
        return []
    terms = [est.parameter, *best.meters]
    theta = np.r_[est.estimated_value, np.zeros(len(best.meters))]
    out = []
    sigma_of = {c: float(np.median(model.sigma_pu[model.code == c]))
                if (model.code == c).any() else 0.01 for c in (P_FLOW, Q_FLOW, P_INJ, Q_INJ)}
    for meter in unmetered_around(model, est.parameter):
        n = len(meter.codes)
        sigma = information_with_rows(model, comparison.joint, terms, theta, meter.codes,
                                      [meter.element] * n, [meter.end] * n,
                                      [sigma_of[c] for c in meter.codes])
        gain = (est.estimated_value - est.model_value) ** 2 * conditional_information(
            sigma, 0, range(1, len(terms)))
        out.append(replace(meter, expected_gain=float(gain)))
    return sorted(out, key=lambda m: -m.expected_gain)
