"""Tap changers: the step→ratio mapping and the branch-state factor against pypower's tap
convention (pypower ``runpf`` on IEEE 57 with a transformer's tap changed: the reference)."""

from __future__ import annotations

import numpy as np
import pytest

from calibra.model.network import network_from_matpower
from calibra.model.tap_changers import ratio_step, state_factor, step_ratio

pp = pytest.importorskip("pypower.api")


def _solved(case: dict) -> dict:
    """pypower's power flow of ``case`` (quiet), converged."""
    opt = pp.ppoption(VERBOSE=0, OUT_ALL=0)
    result, ok = pp.runpf(case, opt)
    assert ok
    return result


def _flows(net, state, result) -> np.ndarray:
    """Our from- and to-end flows (MW, Mvar) at pypower's solved voltages for ``state``."""
    bus = result["bus"]
    v = bus[:, 7] * np.exp(1j * np.deg2rad(bus[:, 8]))
    _, yf, yt = net.admittance_matrices(state)
    a = net.branch_admittances(state)
    sf = v[a.f] * np.conj(yf @ v) * net.base_mva
    st = v[a.t] * np.conj(yt @ v) * net.base_mva
    return np.c_[sf.real, sf.imag, st.real, st.imag]


def _transformer(case: dict) -> int:
    """The first branch of the case with an off-nominal tap."""
    return int(np.flatnonzero(case["branch"][:, 8] != 0)[0])


def test_step_ratio_mapping():
    # common practice, no source: ratio = 1 + (step − neutral) × step% / 100.
    assert step_ratio(0, 0, 1.25) == pytest.approx(1.0)
    assert step_ratio(4, 0, 1.25) == pytest.approx(1.05)
    assert step_ratio(9, 9, 0.625) == pytest.approx(1.0)
    assert step_ratio(1, 9, 0.625) == pytest.approx(0.95)
    assert step_ratio([-8, 16], 0, 1.25) == pytest.approx([0.9, 1.2])
    assert ratio_step(step_ratio(7, 3, 1.5), 3, 1.5) == pytest.approx(7)


def test_from_side_tap_matches_pypower():
    """A from-side tap changer at step +3 (1.25 %/step): our flows with the branch-state factor
    equal pypower's with the tap ratio written into the branch (reference: pypower runpf)."""
    case = pp.case57()
    e = _transformer(case)
    net = network_from_matpower(case)
    net.branches["tap_step_pct"] = np.nan
    net.branches["tap_neutral"] = np.nan
    net.branches["tap_side"] = ""
    branch = net.branches.index[e]
    net.branches.loc[branch, ["tap_step_pct", "tap_neutral", "tap_side"]] = [1.25, 0.0, "from"]
    ratio = float(step_ratio(3, 0, 1.25))
    moved = pp.case57()
    moved["branch"][e, 8] = ratio
    result = _solved(moved)
    state = np.ones(net.n_branch)
    state[e] = state_factor(net, branch, ratio)
    ours = _flows(net, state, result)
    ref = result["branch"][:, 13:17]
    assert np.abs(ours - ref).max() < 1e-6
    # The model's own tap (a bool state) differs from pypower's moved case at that branch.
    assert np.abs(_flows(net, np.ones(net.n_branch, bool), result)[e] - ref[e]).max() > 0.1


def test_to_side_tap_matches_reversed_pypower_branch():
    """A to-side tap changer at ratio 0.95: the pypower branch with its ends swapped and tap
    0.95 on its (new) from side gives the same flows (reference: pypower runpf)."""
    case = pp.case57()
    e = _transformer(case)
    case["branch"][e, 8] = 0.0  # nominal ratio in the model; the changer sets the to side
    net = network_from_matpower(case)
    branch = net.branches.index[e]
    net.branches["tap_step_pct"] = np.nan
    net.branches["tap_neutral"] = np.nan
    net.branches["tap_side"] = ""
    net.branches.loc[branch, ["tap_step_pct", "tap_neutral", "tap_side"]] = [1.25, 0.0, "to"]
    ratio = float(step_ratio(-4, 0, 1.25))
    swapped = pp.case57()
    swapped["branch"][e, [0, 1]] = swapped["branch"][e, [1, 0]]
    swapped["branch"][e, 8] = ratio
    result = _solved(swapped)
    state = np.ones(net.n_branch)
    state[e] = state_factor(net, branch, ratio)
    ours = _flows(net, state, result)
    ref = result["branch"][:, 13:17].copy()
    ref[e] = ref[e, [2, 3, 0, 1]]  # pypower's from end is our to end
    assert np.abs(ours - ref).max() < 1e-6


def test_out_of_service_in_float_state():
    """0 in a float state is out of service (common practice, no source)."""
    net = network_from_matpower(pp.case57())
    state = np.ones(net.n_branch)
    state[3] = 0.0
    a = net.branch_admittances(state)
    assert not a.in_service[3] and a.yff[3] == 0 and a.ytf[3] == 0
    b = net.branch_admittances(state != 0)
    assert np.allclose(a.yft, b.yft) and np.allclose(a.ytt, b.ytt)
