"""Crossed and mis-mapped points: does a point read another quantity of its substation?

For a suspicious point, every quantity of the same kind of unit at its substation (flows at both
ends of the branches that touch its buses, injections and voltages of those buses, currents) is
evaluated from the estimated states; a point that follows one of them far better than its own
implied value reads the wrong quantity (P and Q swapped, wrong branch end, wrong circuit).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from calibra.estimation.measurement_model import SQRT3
from calibra.estimation.measurements import QUANTITY_CODE, MeasurementFunctions
from calibra.model.network import Network
from calibra.model.points import (
    BRANCH_END_QUANTITIES,
    BUS_QUANTITIES,
    QUANTITIES,
    end_place,
    quantity_words,
)

_UNIT_FAMILY = {q: QUANTITIES[q]["family"] for q in (*BRANCH_END_QUANTITIES, *BUS_QUANTITIES)}


@dataclass(frozen=True)
class Quantity:
    """A measurable quantity: a branch end's flow or current, a bus's injection or voltage.

    ``place``: the name of the measured branch end (see :func:`~calibra.model.points.end_place`),
    for the words only; it takes no part in comparing quantities.
    """

    quantity: str
    element: str
    end: str  # "from", "to" or ""
    place: str = field(default="", compare=False)

    def label(self) -> str:
        """'active-power flow at the NRC end of MRG-NRC', 'voltage magnitude at bus DRM_33'."""
        return quantity_words(self.quantity, self.element, self.place)


def substation_quantities(network: Network, substation: str) -> list[Quantity]:
    """Every measurable quantity located at a substation's buses (indexed once per network:
    a review asks for many substations)."""
    index = network._cache.get("substation_quantities")
    if index is None:
        index = {}
        sub_of = network.buses["substation"].astype(str)
        br = network.branches
        for bid, f, t in zip(br.index, br["from_bus"], br["to_bus"], strict=True):
            for end, bus in (("from", f), ("to", t)):
                place = end_place(network.buses, br, bid, end)
                index.setdefault(sub_of[bus], []).append(("branch", str(bid), end, place))
        for b, sub in sub_of.items():
            index.setdefault(sub, []).append(("bus", str(b), "", ""))
        network._cache["substation_quantities"] = index
    out: list[Quantity] = []
    entries = index.get(str(substation), [])
    for kind, element, end, place in sorted(entries, key=lambda e: e[0] == "bus"):
        names = BRANCH_END_QUANTITIES if kind == "branch" else BUS_QUANTITIES
        out += [Quantity(q, element, end, place) for q in names]
    return out


class QuantityEvaluator:
    """Evaluates a list of quantities, in engineering units, for many estimated states."""

    def __init__(self, network: Network, quantities: list[Quantity]):
        self.network = network
        self.quantities = quantities
        code = np.array([QUANTITY_CODE[q.quantity] for q in quantities], np.int64)
        is_bus = np.array([q.end == "" for q in quantities])
        elem = np.array([
            network.buses.index.get_loc(q.element) if q.end == "" else
            network.branches.index.get_loc(q.element) for q in quantities
        ], np.int64)
        end = np.array([1 if q.end == "to" else 0 for q in quantities], np.int64)
        self.functions = MeasurementFunctions(network, code, elem, end)
        adm = network.branch_admittances(np.ones(network.n_branch, bool))
        br = np.minimum(elem, network.n_branch - 1)
        bus_at = np.where(is_bus, elem, np.where(end == 1, adm.t[br], adm.f[br]))
        kv = network.buses["kv"].to_numpy(float)[bus_at]
        unit_per_pu = np.full(len(quantities), network.base_mva)
        v = code == QUANTITY_CODE["v_magnitude"]
        unit_per_pu[v] = kv[v]
        i = code == QUANTITY_CODE["i_magnitude"]
        unit_per_pu[i] = network.base_mva * 1e3 / (SQRT3 * kv[i])
        self.unit_per_pu = unit_per_pu

    def evaluate(self, vm: np.ndarray, va: np.ndarray, in_service: np.ndarray) -> np.ndarray:
        """Values (k × quantities) for states (k × n) with per-snapshot topology (k × branches)."""
        k = vm.shape[0]
        out = np.full((k, len(self.quantities)), np.nan, np.float32)
        # Buses left out of an estimate are NaN; so is every value that depends on them.
        ok = np.isfinite(vm).any(axis=1)
        for row in {r.tobytes(): r for r in in_service}.values():
            sel = np.flatnonzero(ok & np.all(in_service == row, axis=1))
            for a in range(0, sel.size, 2048):
                s = sel[a:a + 2048]
                h = self.functions.evaluate(vm[s].T.astype(float), va[s].T.astype(float), row)
                out[s] = (h * self.unit_per_pu[:, None]).T
        return out


@dataclass
class MismapMatch:
    quantity: Quantity
    loss: float  # median |z − candidate|
    factor: float  # ±1: a crossed point may also be reversed


def best_match(z: np.ndarray, candidates: np.ndarray, quantities: list[Quantity],
               own: Quantity, family: str) -> MismapMatch | None:
    """The candidate quantity (same unit family, not the point's own) that z follows best."""
    best = None
    for j, q in enumerate(quantities):
        if q == own or _UNIT_FAMILY[q.quantity] != family:
            continue
        y = candidates[:, j]
        ok = np.isfinite(z) & np.isfinite(y)
        if ok.sum() < 30:
            continue
        for sign in (1.0, -1.0):
            loss = float(np.median(np.abs(z[ok] - sign * y[ok])))
            if best is None or loss < best.loss:
                best = MismapMatch(q, loss, sign)
    return best


def unit_family(quantity: str) -> str:
    return _UNIT_FAMILY[quantity]


def own_quantity(point: pd.Series) -> Quantity:
    end = str(point.get("end", "") or "").strip().lower()
    return Quantity(str(point["quantity"]), str(point["element"]),
                    end if end in ("from", "to") else "")
