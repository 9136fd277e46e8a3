"""Multi-snapshot estimation of a network parameter jointly with every snapshot's state.

One parameter of the network model (a branch's r, x, b, tap ratio or phase shift, or a bus
shunt) is the same in every snapshot of a week while the states differ; a wrong value makes the
meters around it disagree with the model in the same way snapshot after snapshot. Estimating
it jointly with the states of a sample of the week's snapshots is the augmented-state approach
of parameter estimation (Zarco & Gómez-Expósito, "Power system parameter estimation: a survey",
IEEE Trans. Power Systems 15(1), 2000, from memory): Gauss-Newton on [x₁ … x_K, p], solved by
the Schur complement on p (:mod:`calibra.estimation.parameter_terms`), zero injections held
exactly as the snapshot estimator holds them. The same machinery fits constant meter errors
(:class:`~calibra.estimation.parameter_terms.MeterTerm`), so "a parameter" and "a meter" can be
compared on the same data.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from calibra.estimation.parameter_terms import (
    SampleSnapshot,
    Term,
    TermModel,
    schur_terms,
    snapshot_transform,
)
from calibra.estimation.wls import Estimator
from calibra.model.parameters import NetworkParameter, ParameterKind, model_value
from calibra.progress import Progress

#: Largest relative change of r, x or b in one Gauss-Newton step, and of a tap (absolute),
#: a shift (degrees) or a shunt (share of the larger of its value and 10 Mvar): a guard
#: against a far first step (common practice, no source).
MAX_RELATIVE_STEP = 0.5
MAX_TAP_STEP = 0.1
MAX_SHIFT_STEP = 10.0


@dataclass
class SnapshotSample:
    """Snapshots of a period prepared for a joint fit (converged ordinary estimates only)."""

    snapshots: list[SampleSnapshot]
    skipped: dict[int, str] = field(default_factory=dict)  # position → why it was left out

    def __len__(self) -> int:
        return len(self.snapshots)


def spread_positions(k: int, count: int) -> np.ndarray:
    """``count`` snapshot positions spread evenly over ``k`` (all when k ≤ count)."""
    if k <= count:
        return np.arange(k)
    return np.unique(np.linspace(0, k - 1, count).round().astype(int))


def sample_from_estimates(estimator: Estimator, z: np.ndarray, in_service: np.ndarray,
                          positions=None, available: np.ndarray | None = None,
                          progress: Progress | None = None,
                          starts: SnapshotSample | None = None) -> SnapshotSample:
    """Estimate each snapshot at ``positions`` (default: all rows of ``z``, k × m per unit) with
    the model as it is, and keep the converged ones as the start of a joint fit.
    ``available``: the points that may be used (m, bool; e.g. without meters set aside);
    ``starts``: a sample whose states start the snapshots it holds."""
    positions = np.arange(z.shape[0]) if positions is None else np.asarray(positions, int)
    begin = {s.position: (s.vm, s.va) for s in starts.snapshots} if starts is not None else {}
    snaps, skipped = [], {}
    for j, pos in enumerate(positions):
        if progress is not None:
            progress.update(j, len(positions), "estimating the sample's snapshots")
        zz = z[pos] if available is None else np.where(available, z[pos], np.nan)
        est = estimator.estimate(zz, None, in_service[pos], start=begin.get(int(pos)),
                                 keep_jacobian=False)
        if not est.converged:
            skipped[int(pos)] = est.reason
            continue
        snaps.append(_snapshot(estimator, zz, in_service[pos], int(pos), est.vm, est.va))
    return SnapshotSample(snaps, skipped)


def sample_from_states(estimator: Estimator, z: np.ndarray, in_service: np.ndarray,
                       vm: np.ndarray, va: np.ndarray, positions,
                       available: np.ndarray | None = None) -> SnapshotSample:
    """A sample from states already estimated (e.g. a period result's, k × n): snapshots whose
    state is missing anywhere the observability test estimates are left out."""
    snaps, skipped = [], {}
    for pos in np.asarray(positions, int):
        zz = z[pos] if available is None else np.where(available, z[pos], np.nan)
        v, a = np.asarray(vm[pos], float), np.asarray(va[pos], float)
        snap = _snapshot(estimator, zz, in_service[pos], int(pos), v, a)
        est = snap.layout.magnitude_column >= 0
        if snap.rows.size == 0 or not np.all(np.isfinite(v[est]) & np.isfinite(a[est])):
            skipped[int(pos)] = "no estimated state"
            continue
        snaps.append(snap)
    return SnapshotSample(snaps, skipped)


def _snapshot(estimator: Estimator, z: np.ndarray, in_service: np.ndarray, pos: int,
              vm: np.ndarray, va: np.ndarray) -> SampleSnapshot:
    from calibra.estimation.measurements import StateLayout

    model = estimator.model
    obs = estimator.observability(np.isfinite(z), in_service)
    layout = StateLayout.build(model.network.n_bus, obs.references, obs.estimated_buses)
    rows = np.flatnonzero(np.isfinite(z) & obs.usable)
    crow = np.flatnonzero(obs.constraints_usable) if model.constraints.m else \
        np.zeros(0, np.int64)
    vm = np.where(np.isfinite(vm), vm, 1.0)
    va = np.where(np.isfinite(va), va, 0.0)
    return SampleSnapshot(pos, z, np.asarray(in_service), rows, crow, layout,
                          vm.astype(float), va.astype(float),
                          snapshot_transform(model, layout, in_service))


@dataclass
class JointFit:
    """Terms fitted jointly with the states of a sample (results as data)."""

    terms: list[Term]
    values: np.ndarray
    covariance: np.ndarray
    objective_before: float  # at the start values, states of the ordinary estimates
    objective_after: float
    snapshots: int
    iterations: int
    converged: bool
    reason: str
    multiplier: np.ndarray  # q/√diag(Σ) at the start (normalized Lagrange multipliers)


@dataclass
class ParameterEstimate:
    """One network parameter estimated over a sample of snapshots."""

    parameter: NetworkParameter
    model_value: float
    estimated_value: float
    std: float  # standard deviation of the estimate (from the Schur complement)
    objective_before: float  # Σ of the snapshots' WLS objectives with the model's value
    objective_after: float  # … with the estimated value
    snapshots: int
    iterations: int
    converged: bool
    reason: str
    normalized_multiplier: float  # of the parameter held at its model value

    @property
    def objective_drop(self) -> float:
        return self.objective_before - self.objective_after


def _limit_step(terms: list[Term], theta: np.ndarray, step: np.ndarray) -> np.ndarray:
    """Scale the step so no parameter moves further than the guards allow."""
    scale = 1.0
    for i, term in enumerate(terms):
        if not isinstance(term, NetworkParameter) or step[i] == 0:
            continue
        if term.kind == ParameterKind.TAP:
            most = MAX_TAP_STEP
        elif term.kind == ParameterKind.SHIFT:
            most = MAX_SHIFT_STEP
        elif term.kind == ParameterKind.SHUNT:
            most = MAX_RELATIVE_STEP * max(abs(theta[i]), 10.0)
        else:
            most = MAX_RELATIVE_STEP * max(abs(theta[i]), 1e-6)
        scale = min(scale, most / abs(step[i]))
    return step * scale


def fit_terms(estimator: Estimator, sample: SnapshotSample, terms: list[Term],
              start: np.ndarray | None = None, *, tolerance: float = 1e-10,
              max_iterations: int = 30, progress: Progress | None = None,
              message: str = "fitting") -> JointFit:
    """Gauss-Newton on the states of every snapshot of ``sample`` and the shared ``terms``
    (start: the model's values for network parameters, 0 for meter errors). Converged when the
    largest relative change of a term and the largest state step are below ``tolerance``."""
    model = estimator.model
    tm = TermModel(model, terms)
    theta = tm.model_values.copy() if start is None else np.asarray(start, float).copy()
    snaps = sample.snapshots
    if not snaps:
        nan = np.full(len(terms), np.nan)
        return JointFit(terms, nan, np.diag(nan), np.nan, np.nan, 0, 0, False,
                        "no snapshot of the sample could be estimated", nan)
    first = None
    reason, converged, it = "", False, 0
    previous_objective = np.inf
    for it in range(1, max_iterations + 1):
        if progress is not None:
            progress.update(it - 1, max_iterations, message)
        st = schur_terms(tm, snaps, theta)
        if first is None:
            first = st
        try:
            dtheta = np.linalg.solve(st.sigma, st.q)
        except np.linalg.LinAlgError:
            reason = "the sample does not determine the terms (singular Schur complement)"
            break
        limited = _limit_step(terms, theta, dtheta)
        shrink = 1.0 if not np.any(dtheta) else float(
            np.max(np.abs(limited)) / np.max(np.abs(dtheta)))
        theta = theta + limited
        largest = 0.0
        for snap, Y in zip(snaps, st.solutions, strict=True):
            nx = snap.layout.n_state
            dx = (Y[:nx, 0] - Y[:nx, 1:] @ dtheta) * shrink
            snap.vm, snap.va = snap.layout.apply_step(snap.vm, snap.va, dx)
            largest = max(largest, float(np.abs(dx).max()) if dx.size else 0.0)
        scale = np.maximum(np.abs(theta), 1e-3)
        relative = float(np.max(np.abs(limited) / scale)) if len(terms) else 0.0
        stalled = it >= 8 and st.objective >= previous_objective * (1 - 1e-12)
        previous_objective = st.objective
        if max(relative, largest) < tolerance or (stalled and relative < 1e3 * tolerance):
            converged = True
            break
    else:
        reason = f"no convergence in {max_iterations} iterations"
    final = schur_terms(tm, snaps, theta)
    try:
        cov = np.linalg.inv(final.sigma)
    except np.linalg.LinAlgError:
        cov = np.full((len(terms), len(terms)), np.inf)
    with np.errstate(divide="ignore", invalid="ignore"):
        multiplier = first.q / np.sqrt(np.diag(first.sigma))
    return JointFit(terms, theta, cov, first.objective, final.objective, len(snaps), it,
                    converged, "converged" if converged else reason, multiplier)


def estimate_parameter(estimator: Estimator, sample: SnapshotSample,
                       parameter: NetworkParameter, *, tolerance: float = 1e-10,
                       max_iterations: int = 30,
                       progress: Progress | None = None) -> ParameterEstimate:
    """Estimate one network parameter jointly with the states of ``sample``'s snapshots (the
    sample's states are updated in place to the joint estimate)."""
    p0 = model_value(estimator.model.network, parameter)
    fit = fit_terms(estimator, sample, [parameter], tolerance=tolerance,
                    max_iterations=max_iterations, progress=progress,
                    message=f"estimating the {parameter.label()}")
    return ParameterEstimate(
        parameter, p0, float(fit.values[0]), float(np.sqrt(max(fit.covariance[0, 0], 0.0))),
        fit.objective_before, fit.objective_after, fit.snapshots, fit.iterations,
        fit.converged, fit.reason, float(abs(fit.multiplier[0])))
