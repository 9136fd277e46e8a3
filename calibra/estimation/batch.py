"""Estimate many snapshots in one call, with warm starts, outcomes recorded as data.

Each snapshot's outcome (converged, iterations, reason, chi-square) is a row of a table; a
snapshot that does not converge or is not observable is recorded with its reason and the batch
goes on. The per-snapshot kernel is :class:`~calibra.estimation.wls.Estimator`; a vectorised
week engine can replace it behind the same interface.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from calibra.estimation.dc import estimate_dc
from calibra.estimation.residuals import analyse_residuals
from calibra.estimation.wls import Estimator
from calibra.progress import Progress


@dataclass
class BatchEstimate:
    """Results for k snapshots of m measurements on n buses.

    ``outcomes`` has one row per snapshot: converged, iterations, reason, objective, dof,
    chi2_threshold, chi2_passed, observable, n_used. Arrays are float32 to keep a week small.
    """

    index: pd.Index
    vm: np.ndarray  # (k, n)
    va: np.ndarray  # (k, n)
    residual: np.ndarray  # (k, m) per unit, NaN where not used
    normalized: np.ndarray | None  # (k, m) normalized residuals, when analysed
    sensitivity: np.ndarray | None  # (k, m) Sᵢᵢ, when analysed
    outcomes: pd.DataFrame


def estimate_many(
    estimator: Estimator,
    z: np.ndarray,
    in_service: np.ndarray | None = None,
    index: pd.Index | None = None,
    analyse: bool = True,
    confidence: float = 0.99,
    progress: Progress | None = None,
) -> BatchEstimate:
    """Estimate every row of ``z`` (k × m, per unit, NaN = missing).

    ``in_service`` is (k × branches) or None for the model's topology. The previous converged
    state warm-starts the next snapshot; after a failure or a topology change a DC estimate
    gives the start.
    """
    model = estimator.model
    net = model.network
    z = np.asarray(z, float)
    k = z.shape[0]
    n, m = net.n_bus, model.m
    vm = np.full((k, n), np.nan, np.float32)
    va = np.full((k, n), np.nan, np.float32)
    res = np.full((k, m), np.nan, np.float32)
    rn = np.full((k, m), np.nan, np.float32) if analyse else None
    sens = np.full((k, m), np.nan, np.float32) if analyse else None
    rows = []
    start = None
    last_status = None
    default_status = net.default_in_service()
    for i in range(k):
        if progress is not None and i % 16 == 0:
            progress.update(i, k, "estimating snapshots")
        status = default_status if in_service is None else np.asarray(in_service[i], bool)
        if start is None or last_status is None or not np.array_equal(status, last_status):
            dc = estimate_dc(model, z[i], None, status)
            start = _start_from_dc(dc.va, n) if dc.solved else None
        est = estimator.estimate(z[i], None, status, start=start, keep_jacobian=analyse)
        last_status = status
        row = {
            "converged": est.converged, "iterations": est.iterations, "reason": est.reason,
            "objective": est.objective, "dof": est.dof,
            "observable": est.observability.observable, "n_used": int(est.used.sum()),
        }
        if est.converged:
            vm[i], va[i] = est.vm, est.va
            res[i] = est.residual
            start = (np.nan_to_num(est.vm, nan=1.0), np.nan_to_num(est.va))
            if analyse:
                a = analyse_residuals(estimator, est, confidence)
                rn[i], sens[i] = a.normalized, a.sensitivity_diag
                row.update(chi2_threshold=a.chi2_threshold, chi2_passed=a.chi2_passed,
                           n_critical=int(a.critical.sum()))
        else:
            start = None
        rows.append(row)
    if progress is not None:
        progress.update(k, k, "estimating snapshots")
    idx = index if index is not None else pd.RangeIndex(k, name="snapshot")
    outcomes = pd.DataFrame(rows, index=idx)
    return BatchEstimate(idx, vm, va, res, rn, sens, outcomes)


def _start_from_dc(va_dc: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray]:
    return np.ones(n), np.nan_to_num(va_dc)
