"""Residual analysis of one estimated snapshot: chi-square test, normalized residuals,
estimated errors, critical measurements, and largest-normalized-residual identification.

Theory (Handschin, Schweppe, Kohlas & Fiechter, IEEE Trans. PAS-94(2), 1975; Abur & Gómez-Expósito,
*Power System State Estimation*, 2004): with the gain matrix G = HᵀR⁻¹H and the equality
constraints C, the estimate covariance P is the state block of [[G, Cᵀ], [C, 0]]⁻¹; the residual
covariance is Ω = R − H P Hᵀ and the residual sensitivity S = Ω R⁻¹, with trace(S) = m − n + c.
J(x̂) = Σ rᵢ²/σᵢ² follows χ²(m − n + c). Normalized residual rᴺᵢ = |rᵢ|/√Ωᵢᵢ; estimated error
b̂ᵢ = rᵢ/Sᵢᵢ. A measurement with Sᵢᵢ ≈ 0 is critical: its error cannot be detected.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp
from scipy.special import chdtri

from calibra.estimation.covariance import (
    quadratic_diagonal,
    state_covariance,
    stiff_transform,
)
from calibra.estimation.wls import Estimator, SnapshotEstimate

#: Sᵢᵢ below this is treated as zero: the measurement is critical.
CRITICAL_S = 1e-6
#: Correlation of residuals above which two measurements cannot be told apart.
INDISTINGUISHABLE_CORRELATION = 0.999


def chi_square_threshold(confidence: float, dof):
    """The chi-square quantile χ²(dof) at ``confidence`` (scipy.special.chdtri, the inverse of
    the upper tail: the same as scipy.stats.chi2.ppf without importing scipy.stats, which
    takes about a second)."""
    out = chdtri(dof, 1.0 - confidence)
    return float(out) if np.ndim(out) == 0 else out


@dataclass
class ResidualAnalysis:
    """Per-measurement statistics of one snapshot (arrays of length m, NaN where not used)."""

    omega_diag: np.ndarray
    sensitivity_diag: np.ndarray
    normalized: np.ndarray
    estimated_error: np.ndarray
    critical: np.ndarray
    objective: float
    dof: int
    chi2_threshold: float
    chi2_passed: bool
    confidence: float
    state_covariance: np.ndarray = field(repr=False)


def analyse_residuals(
    estimator: Estimator, est: SnapshotEstimate, confidence: float = 0.99
) -> ResidualAnalysis:
    """Chi-square test and normalized residuals of a converged estimate."""
    model = estimator.model
    m = model.m
    idx = np.flatnonzero(est.used)
    nan = np.full(m, np.nan)
    threshold = chi_square_threshold(confidence, est.dof) if est.dof > 0 else np.nan
    if not est.converged or est.jacobian is None or idx.size == 0:
        return ResidualAnalysis(nan, nan.copy(), nan.copy(), nan.copy(), np.zeros(m, bool),
                                est.objective, est.dof, threshold, False, confidence,
                                np.zeros((0, 0)))
    H = sp.csr_matrix(est.jacobian)
    C = sp.csr_matrix(est.constraint_jacobian) if est.constraint_jacobian is not None else \
        sp.csr_matrix((0, H.shape[1]))
    var = model.sigma_pu[idx] ** 2
    T = stiff_transform(model.network, est.layout, est.in_service)
    P = state_covariance((H.T @ sp.diags(1.0 / var) @ H).tocsc(), C, T)
    hph = quadratic_diagonal(H, P)
    omega = np.maximum(var - hph, 0.0)
    s_diag = omega / var
    r = est.residual[idx]
    critical = s_diag < CRITICAL_S
    with np.errstate(divide="ignore", invalid="ignore"):
        rn = np.where(critical, np.nan, np.abs(r) / np.sqrt(omega))
        bhat = np.where(critical, np.nan, r / s_diag)
    out = [nan.copy() for _ in range(4)]
    for arr, val in zip(out, (omega, s_diag, rn, bhat), strict=True):
        arr[idx] = val
    crit = np.zeros(m, bool)
    crit[idx] = critical
    passed = bool(est.dof <= 0 or est.objective <= threshold)
    return ResidualAnalysis(out[0], out[1], out[2], out[3], crit, est.objective, est.dof,
                            threshold, passed, confidence, P)


def residual_correlation(
    estimator: Estimator, est: SnapshotEstimate, analysis: ResidualAnalysis, i: int
) -> np.ndarray:
    """Correlation of measurement i's residual with each used measurement's (NaN if unused)."""
    model = estimator.model
    idx = np.flatnonzero(est.used)
    pos = int(np.searchsorted(idx, i))
    H = sp.csr_matrix(est.jacobian)
    row = -np.asarray(H @ (analysis.state_covariance @ H[pos].toarray().ravel())).ravel()
    row[pos] += model.sigma_pu[i] ** 2
    out = np.full(model.m, np.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        out[idx] = row / np.sqrt(analysis.omega_diag[i] * analysis.omega_diag[idx])
    return out


@dataclass
class BadDataRemoval:
    """One measurement removed by the largest-normalized-residual test."""

    index: int
    normalized_residual: float
    estimated_error: float  # per unit
    indistinguishable_from: list[int]  # measurements whose residuals are perfectly correlated


@dataclass
class BadDataOutcome:
    removed: list[BadDataRemoval]
    estimate: SnapshotEstimate
    analysis: ResidualAnalysis
    reason: str


def identify_bad_data(
    estimator: Estimator,
    z: np.ndarray,
    available: np.ndarray | None = None,
    in_service: np.ndarray | None = None,
    threshold: float = 3.0,
    confidence: float = 0.99,
    max_removals: int = 20,
) -> BadDataOutcome:
    """Largest-normalized-residual identification with iterative removal.

    While the largest normalized residual exceeds ``threshold`` (3.0, common practice — value
    from memory), remove that measurement and estimate again. Critical measurements (Sᵢᵢ ≈ 0)
    are never blamed. A removal whose residual is perfectly correlated with others' is recorded
    with those measurements: the test cannot tell them apart.
    """
    z = np.asarray(z, float)
    avail = np.isfinite(z) if available is None else np.asarray(available, bool) & np.isfinite(z)
    avail = avail.copy()
    removed: list[BadDataRemoval] = []
    start = None
    while True:
        est = estimator.estimate(z, avail, in_service, start=start)
        analysis = analyse_residuals(estimator, est, confidence)
        if not est.converged:
            return BadDataOutcome(removed, est, analysis, est.reason)
        rn = analysis.normalized
        if not np.isfinite(rn).any() or np.nanmax(rn) <= threshold:
            return BadDataOutcome(removed, est, analysis, "no normalized residual above threshold")
        if len(removed) >= max_removals:
            return BadDataOutcome(removed, est, analysis, f"stopped after {max_removals} removals")
        worst = int(np.nanargmax(rn))
        corr = residual_correlation(estimator, est, analysis, worst)
        twins = [int(j) for j in np.flatnonzero(np.abs(np.nan_to_num(corr)) >
                                                INDISTINGUISHABLE_CORRELATION) if j != worst]
        removed.append(BadDataRemoval(worst, float(rn[worst]),
                                      float(analysis.estimated_error[worst]), twins))
        avail[worst] = False
        start = (np.nan_to_num(est.vm, nan=1.0), np.nan_to_num(est.va))
