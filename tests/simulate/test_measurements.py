"""Simulated measurements against an independent power flow (pypower runpf, test-only reference)."""

import numpy as np
import pandas as pd
from pypower.api import case118, ppoption, runpf

from calibra.model.points import default_sigma
from calibra.simulate.telemetry import historian_resolution


def _pypower_snapshot(ops, k, status):
    """The operating point of snapshot k as a pypower case, solved by runpf."""
    ppc = case118()
    ids = [str(int(b)) for b in ppc["bus"][:, 0]]
    ppc["bus"][:, 2] = ops.load_mw[k]
    ppc["bus"][:, 3] = ops.load_mvar[k]
    gen = ppc["gen"]
    gen[:, 1] = 0.0
    seen = set()
    for g in range(gen.shape[0]):
        bus = ids.index(str(int(gen[g, 0])))
        if gen[g, 7] > 0 and bus not in seen:
            gen[g, 1], gen[g, 2] = ops.gen_mw[k, bus], ops.gen_mvar[k, bus]
            seen.add(bus)
    ppc["branch"][:, 10] = status.astype(float)
    result, ok = runpf(ppc, ppoption(VERBOSE=0, OUT_ALL=0))
    assert ok
    return result


def _reference_values(result, points, network):
    """Point values computed from pypower's bus and branch results, in the points' units."""
    bus_ids = [str(int(b)) for b in result["bus"][:, 0]]
    vm = pd.Series(result["bus"][:, 7], index=bus_ids)
    kv = network.buses["kv"]
    br = result["branch"]
    flows = pd.DataFrame(br[:, 13:17], columns=["pf", "qf", "pt", "qt"],
                         index=network.branches.index)
    inj = pd.Series(0.0 + 0.0j, index=bus_ids)
    for g in result["gen"]:
        if g[7] > 0:
            inj[str(int(g[0]))] += g[1] + 1j * g[2]
    inj -= result["bus"][:, 2] + 1j * result["bus"][:, 3]
    out = {}
    for tag, p in points.iterrows():
        q, e, end = p["quantity"], str(p["element"]), p["end"]
        if q in ("p_flow", "q_flow", "i_magnitude"):
            side = "f" if end == "from" else "t"
            s = flows.at[e, "p" + side] + 1j * flows.at[e, "q" + side]
            bus = network.branches.at[e, "from_bus" if end == "from" else "to_bus"]
            out[tag] = {"p_flow": s.real, "q_flow": s.imag,
                        "i_magnitude": abs(s) / (np.sqrt(3) * vm[bus] * kv[bus]) * 1000}[q]
        elif q == "p_injection":
            out[tag] = inj[e].real
        elif q == "q_injection":
            out[tag] = inj[e].imag
        elif q == "v_magnitude":
            out[tag] = vm[e] * kv[e]
    return pd.Series(out)


def test_measurements_match_pypower_flows(clean118):
    # Reference: pypower.runpf on the snapshot's loads and generation; branch results PF, QF,
    # PT, QT (MW, Mvar), VM × base kV, |I| = |S| / (√3 V) and injections Pg - Pd.
    res = clean118
    site, ops = res.site, res.operating
    net = site.network
    outage = ops.outages[0]
    for k in (10, int(np.flatnonzero(site.snapshots.index >= outage.start)[0]) + 5):
        ref = _pypower_snapshot(ops, k, ops.in_service[k])
        analog = site.points[site.points["quantity"] != "branch_status"]
        expected = _reference_values(ref, analog, net)
        true_k = res.true_values.iloc[k][expected.index]
        # Noise-free values agree with the independent power flow (its tolerance 1e-8 pu).
        np.testing.assert_allclose(true_k, expected, atol=1e-3, rtol=1e-6)
        # Measured values lie within noise (5 σ) plus half a historian step of the truth.
        measured = site.snapshots.iloc[k][expected.index]
        bound = 5 * default_sigma(analog) + historian_resolution(analog) / 2
        ok = measured.isna() | ((measured - expected).abs() <= bound[expected.index])
        assert ok.all(), measured[~ok]


def test_outage_shows_in_status_and_flows(clean118):
    res = clean118
    pts, snaps, ops = res.site.points, res.site.snapshots, res.operating
    out = ops.outages[0]
    inside = (snaps.index >= out.start) & (snaps.index < out.end)
    assert 0 < inside.sum() < len(snaps)
    status = pts.index[(pts["quantity"] == "branch_status") & (pts["element"] == out.branch)]
    assert len(status) == 1
    col = snaps[status[0]]
    assert (col[inside].dropna() == 0).all() and (col[~inside].dropna() == 1).all()
    flows = pts.index[(pts["quantity"] == "p_flow") & (pts["element"] == out.branch)]
    assert (res.true_values.loc[inside, flows].abs() < 1e-9).all().all()
    other = snaps.columns[pts["quantity"] == "branch_status"].drop(status[0])
    others = snaps.loc[:, other]
    assert (others.isna() | (others == 1)).all().all()


def test_noise_has_the_accuracy_class_sigma(clean118):
    # σ = class % × full scale / 3 (common practice, no source): the normalised errors of all
    # analog points pooled must have unit variance; with n ≈ 2e5 samples the sample variance
    # is within ±2 % of 1 (chi-square with n degrees of freedom, sd ≈ √(2/n)).
    res = clean118
    pts = res.site.points
    analog = pts.index[pts["quantity"] != "branch_status"]
    z = (res.site.snapshots[analog] - res.true_values[analog]) / default_sigma(pts.loc[analog])
    values = z.to_numpy().ravel()
    values = values[np.isfinite(values)]
    assert len(values) > 100_000
    assert abs(values.var() - 1.0) < 0.02
    assert abs(values.mean()) < 0.01


def test_missing_values_and_rtu_outage(clean118):
    res = clean118
    snaps, pts = res.site.snapshots, res.site.points
    rtu, start, end = res.rtu_outage
    window = (snaps.index >= start) & (snaps.index < end)
    cols = pts.index[pts["rtu"] == rtu]
    assert snaps.loc[window, cols].isna().all().all()
    assert snaps.loc[~window, cols].notna().mean().mean() > 0.98
    share = snaps.isna().mean().mean()
    assert 0.0005 < share < 0.05
