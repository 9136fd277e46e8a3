"""Observability on published real networks, against independent rank tests.

References: the decoupled numerical observability test (Monticelli & Wu, IEEE Trans.
PAS-104(5), 1985; Abur & Gómez-Expósito 2004, ch. 4 — from memory); networks from pandapower's
``networks`` module (PEGASE 89 and 1354, the Icelandic grid with a series capacitor and
x = 1e-4 pu couplers, the GB reduced network); independent methods: a dense SVD (scipy.linalg)
of the decoupled Jacobian with the networks' own susceptances 1/x, and of the AC measurement
Jacobian from pypower's dSbus_dV / dSbr_dV at pypower's power-flow solution.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import scipy.linalg as la

from calibra.estimation.measurement_model import MeasurementModel
from calibra.estimation.wls import Estimator
from calibra.simulate.metering import MeteringOptions, make_point_list
from tests.published import published_case, published_grid_case

pytest.importorskip("pandapower")

#: Field-like sparse metering: about half the branch ends, some branches with no meter at all.
SPARSE = MeteringOptions(branch_end_coverage=0.5, injection_coverage=0.7, voltage_coverage=0.5,
                         independent_ends=True)


def _setup(name: str, seed: int, options: MeteringOptions = SPARSE):
    case = published_grid_case(name)
    points = make_point_list(case, options=options, seed=seed)
    model = MeasurementModel.from_points(case.network, points)
    return case, points, model


# ------------------------------------------------------------------ independent rank tests
def _null_space(a: np.ndarray, tol: float = 1e-9) -> np.ndarray:
    """Null-space basis of the row-normalised matrix (dense SVD), columns scaled to max 1."""
    a = a[np.linalg.norm(a, axis=1) > 0]
    if a.shape[0] == 0:
        return np.eye(a.shape[1])
    a = a / np.linalg.norm(a, axis=1)[:, None]
    _, s, vt = la.svd(a, full_matrices=True)
    null = vt[int((s > tol * s[0]).sum()):].T
    return null / np.maximum(np.abs(null).max(axis=0), 1e-300)[None, :] if null.size else null


def _decoupled_rows(net, points, model):
    """Dense decoupled rows with the real susceptances 1/x (negative for series capacitors):
    P-θ (flows, injections, zero injections) and Q-V (flows, injections, zero injections, |V|)."""
    n = net.n_bus
    br = net.branches
    f, t = net.bus_positions(br["from_bus"]), net.bus_positions(br["to_bus"])
    b = 1.0 / br["x"].to_numpy(float)
    on = br["in_service"].to_numpy(bool)
    lap = np.zeros((n, n))
    for k in np.flatnonzero(on):
        lap[[f[k], t[k]], [f[k], t[k]]] += b[k]
        lap[f[k], t[k]] -= b[k]
        lap[t[k], f[k]] -= b[k]
    rows_p, rows_q = [], []
    for tag in model.tags:
        p = points.loc[tag]
        q = p["quantity"]
        if q in ("p_flow", "q_flow"):
            k = br.index.get_loc(p["element"])
            row = np.zeros(n)
            row[f[k]], row[t[k]] = b[k], -b[k]
            (rows_p if q == "p_flow" else rows_q).append(row)
        elif q in ("p_injection", "q_injection"):
            (rows_p if q == "p_injection" else rows_q).append(lap[net.buses.index.get_loc(
                p["element"])].copy())
        elif q == "v_magnitude":
            row = np.zeros(n)
            row[net.buses.index.get_loc(p["element"])] = 1.0
            rows_q.append(row)
    for k in np.flatnonzero(net.buses["zero_injection"].to_numpy(bool)):
        rows_p.append(lap[k].copy())
        rows_q.append(lap[k].copy())
    return np.array(rows_p), np.array(rows_q)


def _svd_islands(net, points, model) -> np.ndarray:
    """Observable island per bus (-1: not estimable) by dense SVD: buses with equal rows of the
    P-θ null-space basis share an island, a magnitude is known where its Q-V null row is zero;
    rows touching a lost bus or two islands are dropped and the test repeated."""
    a_p, a_q = _decoupled_rows(net, points, model)
    n = net.n_bus
    label = np.zeros(n, np.int64)
    for _ in range(10):
        null_p, null_q = _null_space(a_p), _null_space(a_q)
        if null_p.shape[1]:
            _, group = np.unique(np.round(null_p, 6), axis=0, return_inverse=True)
            group = group.ravel()
        else:
            group = np.zeros(n, np.int64)
        v_known = np.abs(null_q).max(axis=1) < 1e-6 if null_q.shape[1] else np.ones(n, bool)
        estimable = v_known & (np.bincount(group)[group] > 1)
        label = np.where(estimable, group, -1)

        kp, kq = _within_one_island(a_p, label), _within_one_island(a_q, label)
        if kp.all() and kq.all():
            break
        a_p, a_q = a_p[kp], a_q[kq]
    return label


def _within_one_island(a: np.ndarray, label: np.ndarray) -> np.ndarray:
    out = []
    for row in a:
        seen = set(label[np.abs(row) > 0])
        out.append(len(seen) == 1 and -1 not in seen)
    return np.array(out, bool)


def _same_partition(a: np.ndarray, b: np.ndarray) -> bool:
    pairs = set(zip(a.tolist(), b.tolist(), strict=True))
    return (np.array_equal(a < 0, b < 0) and len(pairs) == len({x for x, _ in pairs})
            == len({y for _, y in pairs}))


@pytest.mark.parametrize("name,seed", [
    ("case89pegase", 1), ("case89pegase", 3), ("case89pegase", 4), ("iceland", 1),
    ("iceland", 2), ("iceland", 4), ("GBreducednetwork", 1), ("case1354pegase", 1),
])
def test_islands_equal_a_dense_svd_of_the_decoupled_jacobian(name, seed):
    case, points, model = _setup(name, seed)
    net = case.network
    obs = Estimator(model).observability(np.ones(model.m, bool), net.default_in_service())
    independent = _svd_islands(net, points, model)
    assert _same_partition(obs.island, independent)
    assert obs.n_islands == len(set(independent[independent >= 0]))


def _ac_jacobian(name: str, net, points, model) -> np.ndarray:
    """AC measurement Jacobian (rows: every analog point but |I|, then the zero injections;
    columns: all angles, then all magnitudes) from pypower at its power-flow solution."""
    from pypower.api import ppoption, runpf
    from pypower.dSbr_dV import dSbr_dV
    from pypower.dSbus_dV import dSbus_dV
    from pypower.ext2int import ext2int
    from pypower.makeYbus import makeYbus

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result, ok = runpf(published_case(name), ppoption(VERBOSE=0, OUT_ALL=0))
    assert ok
    r = ext2int(result)
    ybus, yf, yt = makeYbus(r["baseMVA"], r["bus"], r["branch"])
    v = r["bus"][:, 7] * np.exp(1j * np.deg2rad(r["bus"][:, 8]))
    ds_dvm, ds_dva = dSbus_dV(ybus, v)
    dsf_dva, dsf_dvm, dst_dva, dst_dvm, _, _ = dSbr_dV(r["branch"], yf, yt, v)
    n = len(v)
    rows = []
    for tag in model.tags:
        p = points.loc[tag]
        q = p["quantity"]
        if q in ("p_flow", "q_flow"):
            k = net.branches.index.get_loc(p["element"])
            da, dm = (dsf_dva, dsf_dvm) if p["end"] == "from" else (dst_dva, dst_dvm)
            row = np.r_[da[k].toarray().ravel(), dm[k].toarray().ravel()]
            rows.append(row.real if q == "p_flow" else row.imag)
        elif q in ("p_injection", "q_injection"):
            k = net.buses.index.get_loc(p["element"])
            row = np.r_[ds_dva[k].toarray().ravel(), ds_dvm[k].toarray().ravel()]
            rows.append(row.real if q == "p_injection" else row.imag)
        elif q == "v_magnitude":
            row = np.zeros(2 * n)
            row[n + net.buses.index.get_loc(p["element"])] = 1.0
            rows.append(row)
        else:
            rows.append(np.full(2 * n, np.nan))  # |I|: left out
    for k in np.flatnonzero(net.buses["zero_injection"].to_numpy(bool)):
        row = np.r_[ds_dva[k].toarray().ravel(), ds_dvm[k].toarray().ravel()]
        rows += [row.real, row.imag]
    return np.array(rows)


@pytest.mark.parametrize("name,seed", [("case89pegase", 1), ("iceland", 1), ("iceland", 2)])
def test_what_is_estimated_is_observable_in_the_ac_jacobian(name, seed):
    """The rows and states the estimator will use have full column rank in the AC Jacobian
    (the decoupled test never claims a state the AC model cannot give)."""
    case, points, model = _setup(name, seed)
    net = case.network
    obs = Estimator(model).observability(np.ones(model.m, bool), net.default_in_service())
    jac = _ac_jacobian(name, net, points, model)
    n = net.n_bus
    zi = int(net.buses["zero_injection"].sum())
    use = np.r_[obs.usable, np.repeat(obs.constraints_usable[:zi] & obs.constraints_usable[zi:],
                                      2)]
    use &= np.isfinite(jac).all(axis=1)
    angles = obs.estimated_buses.copy()
    angles[obs.references] = False
    cols = np.r_[angles, obs.estimated_buses]
    sub = jac[np.ix_(use, cols)]
    sub = sub / np.maximum(np.linalg.norm(sub, axis=1), 1e-300)[:, None]
    sub = sub / np.maximum(np.linalg.norm(sub, axis=0), 1e-300)[None, :]
    s = la.svdvals(sub)
    assert s[-1] > 1e-8 * s[0], (s[-1], s[0], n)


def test_a_deliberately_unobservable_radial_bus_is_lost_alone():
    """PEGASE 89 metered generously, then every meter that sees one radial bus removed (its
    branch's flows, its own and its neighbour's injections, its voltage): exactly that bus is
    lost and the rest is one island; the dense SVD of the decoupled Jacobian agrees."""
    full = MeteringOptions(branch_end_coverage=0.9, injection_coverage=1.0, voltage_coverage=1.0)
    case, points, _ = _setup("case89pegase", 5, full)
    net = case.network
    degree = net.branches["from_bus"].value_counts().add(
        net.branches["to_bus"].value_counts(), fill_value=0)
    radial = sorted(degree.index[degree == 1])[0]
    br = net.branches
    branch = br.index[(br["from_bus"] == radial) | (br["to_bus"] == radial)][0]
    neighbour = (set(br.loc[branch, ["from_bus", "to_bus"]]) - {radial}).pop()
    if net.buses.at[radial, "zero_injection"]:
        pytest.skip("the radial bus carries a zero-injection constraint")
    sees = ((points["element"] == branch) | (points["element"] == radial)
            | ((points["element"] == neighbour)
               & points["quantity"].isin(["p_injection", "q_injection"])))
    kept = points[~sees]
    model = MeasurementModel.from_points(net, kept)
    obs = Estimator(model).observability(np.ones(model.m, bool), net.default_in_service())
    lost = set(net.buses.index[~obs.estimated_buses])
    assert lost == {radial}
    assert obs.n_islands == 1 and not obs.observable
    assert _same_partition(obs.island, _svd_islands(net, kept, model))


def test_real_model_features_do_not_change_the_answer():
    """The same metering on the Icelandic grid (series capacitor x < 0, couplers x = 1e-4 pu,
    0.22-21 kV terminals): fully metered it is observable, as a dense SVD of its decoupled
    Jacobian with the real 1/x confirms (the structural test does not see the impedances)."""
    full = MeteringOptions(branch_end_coverage=0.85, injection_coverage=1.0,
                           voltage_coverage=0.8)
    case, points, model = _setup("iceland", 3, full)
    net = case.network
    assert (net.branches["x"] < 0).any() and (net.branches["x"].abs() <= 1e-4).any()
    obs = Estimator(model).observability(np.ones(model.m, bool), net.default_in_service())
    independent = _svd_islands(net, points, model)
    assert (independent >= 0).all() and len(set(independent)) == 1
    assert obs.observable


def test_outcome_is_cached_per_topology_and_pattern():
    case, _, model = _setup("case89pegase", 1)
    est = Estimator(model)
    status = case.network.default_in_service()
    avail = np.ones(model.m, bool)
    first = est.observability(avail, status)
    assert est.observability(avail.copy(), status.copy()) is first
    avail[0] = False
    assert est.observability(avail, status) is not first
