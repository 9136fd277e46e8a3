"""True values of telemetered quantities, in each point's own unit, from network states.

Everything is vectorised over snapshots: states are (K, n_bus) arrays, results (K, n_points).
Units: MW and Mvar on the system base, kV line-to-line from the bus's nominal kV, A from the
per-unit current at that branch end and that end's base current ``base_mva / (√3 · kV)``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from calibra.model.network import Network, branch_status
from calibra.model.points import BRANCH_QUANTITIES, TAP_QUANTITY


def branch_end_power(
    network: Network, v: np.ndarray, in_service: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Complex power (pu) leaving each branch end into the branch: (K, n_branch) from and to."""
    _, yf, yt = network.admittance_matrices(in_service)
    a = network.branch_admittances(in_service)
    i_from = v @ yf.T.tocsr()
    i_to = v @ yt.T.tocsr()
    return v[:, a.f] * np.conj(i_from), v[:, a.t] * np.conj(i_to)


def bus_injection(network: Network, v: np.ndarray, in_service: np.ndarray | None = None):
    """Net complex injection (pu) into the network at each bus, (K, n_bus)."""
    ybus, _, _ = network.admittance_matrices(in_service)
    return v * np.conj(v @ ybus.T.tocsr())


def point_values(
    network: Network,
    points: pd.DataFrame,
    vm: np.ndarray,
    va_rad: np.ndarray,
    in_service: np.ndarray | None = None,
) -> np.ndarray:
    """Noise-free value of every point (columns in ``points`` order) for K states of one topology.

    ``vm``/``va_rad`` are (K, n_bus). ``branch_status`` points give 1.0 or 0.0 from
    ``in_service`` (default: the network's own status).
    """
    vm = np.atleast_2d(vm)
    v = vm * np.exp(1j * np.atleast_2d(va_rad))
    status = network.default_in_service() if in_service is None else np.asarray(in_service)
    base = network.base_mva
    kv = network.buses["kv"].to_numpy(float)
    a = network.branch_admittances(status)
    s_from, s_to = branch_end_power(network, v, status)
    s_bus = bus_injection(network, v, status)
    out = np.full((v.shape[0], len(points)), np.nan)
    quantity = points["quantity"].to_numpy()
    element = points["element"].astype(str).to_numpy()
    end = points["end"].fillna("").astype(str).to_numpy()
    for name in np.unique(quantity):
        cols = np.flatnonzero(quantity == name)
        if name in BRANCH_QUANTITIES:
            pos = network.branch_positions(element[cols])
            if name == "branch_status":
                out[:, cols] = branch_status(status)[pos].astype(float)[None, :]
                continue
            if name == TAP_QUANTITY:
                continue  # a step number is set by the tap changer's motion, not the state
            to_end = end[cols] == "to"
            s = np.where(to_end, s_to[:, pos], s_from[:, pos])
            bus = np.where(to_end, a.t[pos], a.f[pos])
            if name == "p_flow":
                out[:, cols] = s.real * base
            elif name == "q_flow":
                out[:, cols] = s.imag * base
            else:
                amps_per_pu = base * 1000.0 / (np.sqrt(3.0) * kv[bus])
                out[:, cols] = np.abs(s) / vm[:, bus] * amps_per_pu
        else:
            pos = network.bus_positions(element[cols])
            if name == "p_injection":
                out[:, cols] = s_bus[:, pos].real * base
            elif name == "q_injection":
                out[:, cols] = s_bus[:, pos].imag * base
            elif name == "v_magnitude":
                out[:, cols] = vm[:, pos] * kv[pos]
            else:
                raise ValueError(f"unknown quantity {name!r}")
    return out


def point_values_series(
    network: Network,
    points: pd.DataFrame,
    vm: np.ndarray,
    va_rad: np.ndarray,
    in_service: np.ndarray,
) -> np.ndarray:
    """:func:`point_values` for snapshots whose topology varies (``in_service``: K × n_branch
    branch state)."""
    status = np.asarray(in_service)
    out = np.empty((vm.shape[0], len(points)))
    topologies, group = np.unique(status, axis=0, return_inverse=True)
    for g, topo in enumerate(topologies):
        rows = np.flatnonzero(group.ravel() == g)
        out[rows] = point_values(network, points, vm[rows], va_rad[rows], topo)
    return out
