"""Which points of a point list are critical (no redundancy) at a given state.

Used by the simulator to keep seeded faults on points whose errors can be seen. The
measurement Jacobian is taken by central differences of :func:`point_values`, zero-injection
buses enter as exact constraints (the state is restricted to their null space), and the
residual sensitivity ``S = I − H G⁻¹ Hᵀ R⁻¹`` follows from an SVD of the weighted Jacobian.
A point with Sᵢᵢ = 0 is critical (here: below a small tolerance, as a point with Sᵢᵢ of
1e-6 is just as blind in practice); two points whose residuals are fully correlated form a
critical pair (an error is seen but cannot be told apart between them). Definitions:
Abur & Gómez-Expósito, *Power System State Estimation*, 2004, ch. 5.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.linalg import null_space

from calibra.model.network import Network
from calibra.model.points import analog_points, default_sigma
from calibra.simulate.quantities import point_values

STEP = 1e-6
#: Singular values below this fraction of the largest count as zero (finite-difference noise).
RANK_TOL = 1e-9


@dataclass
class RedundancyReport:
    """Residual sensitivity Sᵢᵢ per analog tag, critical points and critical pairs."""

    residual_sensitivity: pd.Series
    critical: list[str]
    critical_pairs: list[tuple[str, str]]
    observable: bool

    @property
    def unidentifiable(self) -> set[str]:
        """Critical points and members of critical pairs: errors there cannot be located."""
        return set(self.critical) | {t for pair in self.critical_pairs for t in pair}

    def weak(self, min_sensitivity: float = 0.2) -> set[str]:
        """Unidentifiable points and those with Sᵢᵢ below ``min_sensitivity``.

        An error b shows as a normalized residual of about |b|·√Sᵢᵢ/σ, so a point with small
        Sᵢᵢ hides errors of many σ.
        """
        low = self.residual_sensitivity.index[self.residual_sensitivity < min_sensitivity]
        return self.unidentifiable | set(low)


def _jacobian(network, points, vm, va, status) -> np.ndarray:
    n = network.n_bus
    ref = network.reference_position
    angle_cols = [i for i in range(n) if i != ref]
    nx = len(angle_cols) + n
    vm_p = np.repeat(vm[None, :], 2 * nx, axis=0)
    va_p = np.repeat(va[None, :], 2 * nx, axis=0)
    for j in range(nx):
        for sign, row in ((1.0, 2 * j), (-1.0, 2 * j + 1)):
            if j < len(angle_cols):
                va_p[row, angle_cols[j]] += sign * STEP
            else:
                vm_p[row, j - len(angle_cols)] += sign * STEP
    vals = point_values(network, points, vm_p, va_p, status)
    return ((vals[0::2] - vals[1::2]) / (2 * STEP)).T


def redundancy_report(
    network: Network,
    points: pd.DataFrame,
    vm: np.ndarray,
    va_rad: np.ndarray,
    in_service: np.ndarray | None = None,
    *,
    critical_tol: float = 1e-5,
    pair_tol: float = 1e-3,
) -> RedundancyReport:
    """Critical points and pairs of the analog points of ``points`` at state (vm, va_rad).

    A point is critical when Sᵢᵢ < ``critical_tol``; two points form a critical pair when the
    correlation of their residuals exceeds ``1 − pair_tol`` in magnitude.
    """
    status = network.default_in_service() if in_service is None else np.asarray(in_service)
    analog = analog_points(points)
    sigma = default_sigma(analog).to_numpy(float)
    h = _jacobian(network, analog, vm, va_rad, status) / sigma[:, None]
    zero = network.buses.index[network.zero_injection_positions]
    if len(zero):
        zi = pd.DataFrame({
            "quantity": ["p_injection"] * len(zero) + ["q_injection"] * len(zero),
            "element": list(zero) * 2, "end": "",
        })
        c = _jacobian(network, zi, vm, va_rad, status)
        basis = null_space(c, rcond=1e-9)
        h = h @ basis
    u, s, _ = np.linalg.svd(h, full_matrices=False)
    rank = int((s > RANK_TOL * max(s.max(initial=0.0), 1e-300)).sum())
    u = u[:, :rank]
    omega = np.eye(len(analog)) - u @ u.T  # residual covariance of the whitened residuals
    sens = np.clip(np.diag(omega), 0.0, 1.0)
    tags = list(analog.index)
    critical = [t for t, v in zip(tags, sens, strict=True) if v < critical_tol]
    pairs = []
    ok = np.flatnonzero(sens >= critical_tol)
    if len(ok):
        d = np.sqrt(sens[ok])
        rho = np.abs(omega[np.ix_(ok, ok)]) / np.outer(d, d)
        np.fill_diagonal(rho, 0.0)
        for i, j in zip(*np.nonzero(np.triu(rho > 1.0 - pair_tol)), strict=True):
            pairs.append((tags[ok[i]], tags[ok[j]]))
    return RedundancyReport(
        pd.Series(sens, index=analog.index), critical, pairs, observable=rank == h.shape[1]
    )
