"""A utility-like point list for any network: devices per bay, ratios, full scales, tags.

Tag convention (our own): ``<SUB>.<kV>.<BAY>.<MEASURAND>``, e.g. ``NRC.110.PLB1.MW`` is the
active power at Norrance's 110 kV bay of the first circuit towards Pellbrook. Bays: a line is
named after the far substation and its circuit number; a transformer end is ``T<k>`` plus
``H``/``L`` (higher/lower voltage side; ``A``/``B`` when both sides have the same kV); a bus
injection is ``GEN<k>`` or ``LOAD<k>``; a busbar voltage transformer is ``BB<k>``. Measurands:
``MW``, ``MVAR``, ``AMP``, ``KV`` and ``CB`` (circuit-breaker status of a branch).

The device of a point is its bay (``<SUB>.<kV>.<BAY>``): P, Q and I at one branch end share it.
Each metered substation has one RTU, ``RTU-<SUB>``, with channels numbered in point-list order.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

from calibra.model.points import (
    FLOW_QUANTITIES,
    INJECTION_QUANTITIES,
    POINT_COLUMNS,
    REPORTING_COLUMNS,
)
from calibra.simulate.case import GridCase
from calibra.simulate.powerflow import solve_power_flow_batch
from calibra.simulate.quantities import branch_end_power, bus_injection

#: IEEE C57.13 multi-ratio CT taps, primary amperes for a 5 A secondary (REFERENCES.md [R]).
MULTI_RATIO_CT_TAPS: dict[int, tuple[int, ...]] = {
    600: (50, 100, 150, 200, 250, 300, 400, 450, 500, 600),
    1200: (100, 200, 300, 400, 500, 600, 800, 900, 1000, 1200),
    2000: (300, 400, 500, 800, 1100, 1200, 1500, 1600, 2000),
    3000: (300, 500, 800, 1000, 1200, 1500, 2000, 2200, 2500, 3000),
}
#: Larger single-ratio CT primaries (IEEE C57.13 single ratios 50…12000:5; from memory [M]).
SINGLE_RATIO_CT_PRIMARIES = (4000, 5000, 6000, 8000, 10000, 12000)
CT_SECONDARY_A = 5

MEASURAND = {
    "p_flow": "MW", "q_flow": "MVAR", "i_magnitude": "AMP", "p_injection": "MW",
    "q_injection": "MVAR", "v_magnitude": "KV", "branch_status": "CB",
}
UNIT = {
    "p_flow": "MW", "q_flow": "Mvar", "i_magnitude": "A", "p_injection": "MW",
    "q_injection": "Mvar", "v_magnitude": "kV", "branch_status": "status",
}


@dataclass(frozen=True)
class MeteringOptions:
    """How densely a network is metered.

    ``branch_end_coverage``: chance that a branch end has a P/Q device (each branch keeps at
    least one metered end where it can); ``current_share``: chance that a metered branch end
    also reports |I|; ``injection_coverage``: chance that a generator or load bus has P/Q
    injection points; ``voltage_coverage``: chance that a bus has a |V| point (every metered
    substation keeps at least one). ``fully_metered_substations`` have every branch end,
    injection, current and voltage metered. ``unmetered_substations`` have no RTU and no points;
    ``n_unmetered`` more are drawn among small substations without generation, to leave
    areas sparsely metered. Points of ``commissioning_substations`` come last in the list,
    noted ``commissioning``. CT primaries are chosen at least ``headroom`` times the base-case
    current (see :func:`_sizing_flows`). ``independent_ends``: each branch end is metered with
    chance ``branch_end_coverage`` on its own, so a branch may have no flow meter at all (sparse
    field metering, where parts of the network are not observable). ``bare_status_points``:
    status points leave ``device``, ``full_scale`` and ``accuracy_pct`` empty, as utility point
    lists often do for breaker status.
    """

    branch_end_coverage: float = 0.85
    current_share: float = 0.3
    injection_coverage: float = 1.0
    voltage_coverage: float = 0.8
    status_points: bool = True
    fully_metered_substations: tuple[str, ...] = ()
    unmetered_substations: tuple[str, ...] = ()
    n_unmetered: int = 0
    commissioning_substations: tuple[str, ...] = ()
    headroom: float = 2.0
    independent_ends: bool = False
    bare_status_points: bool = False


def substation_code(substation: str) -> str:
    """Tag prefix of a substation: upper-case letters and digits, never starting with a digit."""
    code = re.sub(r"[^A-Za-z0-9]", "", str(substation)).upper() or "SUB"
    return f"S{code}" if code[0].isdigit() else code


def kv_label(kv: float) -> str:
    return str(int(round(kv))) if abs(kv - round(kv)) < 1e-9 else f"{kv:g}".replace(".", "_")


def choose_ct(current_a: float, headroom: float = 2.0) -> tuple[float, str]:
    """CT primary (A) and ratio text for a typical current: the smallest standard tap ≥ headroom×I.

    Multi-ratio IEEE C57.13 taps first, then larger single ratios; beyond 12000 A no standard
    CT fits and the ratio is left empty with a rounded primary.
    """
    needed = max(headroom * float(current_a), 50.0)
    for taps in MULTI_RATIO_CT_TAPS.values():
        fit = [t for t in taps if t >= needed]
        if fit:
            return float(fit[0]), f"{fit[0]}:{CT_SECONDARY_A}"
    for prim in SINGLE_RATIO_CT_PRIMARIES:
        if prim >= needed:
            return float(prim), f"{prim}:{CT_SECONDARY_A}"
    return nice_ceil(needed), ""


def nice_ceil(x: float) -> float:
    """Round up to 1, 1.2, 1.5, 2, 2.5, 3, 4, 5, 6 or 8 times a power of ten."""
    if x <= 0:
        return 1.0
    mag = 10.0 ** np.floor(np.log10(x))
    for m in (1, 1.2, 1.5, 2, 2.5, 3, 4, 5, 6, 8, 10):
        if m * mag >= x * (1 - 1e-12):
            return float(m * mag)
    return float(10 * mag)


def _sig3(x: float) -> float:
    return float(f"{x:.3g}")


def _accuracy(kv: float, rng: np.random.Generator) -> float:
    if kv >= 200:
        return float(rng.choice([0.2, 0.5], p=[0.6, 0.4]))
    if kv >= 60:
        return float(rng.choice([0.2, 0.5, 1.0], p=[0.2, 0.6, 0.2]))
    return float(rng.choice([0.5, 1.0], p=[0.4, 0.6]))


def _vt_ratio(kv: float, frequency_hz: float) -> str:
    secondary = 110 if frequency_hz < 55 else 115
    return f"{int(round(kv * 1000))}:{secondary}"


class _Namer:
    """Hands out unique bay names per substation and voltage."""

    def __init__(self) -> None:
        self.count: dict[tuple, int] = {}

    def next(self, sub: str, kv: str, base: str) -> int:
        key = (sub, kv, base)
        self.count[key] = self.count.get(key, 0) + 1
        return self.count[key]


def _pick_unmetered(case: GridCase, opts: MeteringOptions, rng: np.random.Generator) -> set[str]:
    net = case.network
    sub = net.buses["substation"].astype(str)
    chosen = {str(s) for s in opts.unmetered_substations}
    if opts.n_unmetered <= 0:
        return chosen
    br = net.branches
    fsub = sub[br["from_bus"]].to_numpy()
    tsub = sub[br["to_bus"]].to_numpy()
    external = pd.Series(np.r_[fsub[fsub != tsub], tsub[fsub != tsub]]).value_counts()
    with_gen = set(sub[case.generator_buses])
    small = [s for s in external.index if external[s] <= 2 and s not in with_gen | chosen]
    k = min(opts.n_unmetered, len(small))
    chosen |= set(rng.choice(sorted(small), size=k, replace=False).tolist()) if k else set()
    return chosen


def _sizing_flows(
    case: GridCase, headroom: float, rng: np.random.Generator, variants: int = 32
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """MVA each meter must cover: branch ends (from, to) and bus injections.

    The larger of ``headroom`` × the base-case flow and 1.5 × the largest flow over random
    operating points (loads 40–115 % per bus, voltage-controlling generators redispatched
    ±20 %, other generators 0–200 %), so that a line lightly loaded in the base case still
    gets a CT that fits its everyday flows.
    """
    net = case.network
    base = case.solve()
    if not base.converged:
        raise ValueError(f"the base case of {net.name!r} does not solve; cannot size the meters")
    load = case.load_mw.to_numpy(float) + 1j * case.load_mvar.to_numpy(float)
    gen = case.gen_mw.to_numpy(float) + 1j * case.gen_mvar.to_numpy(float)
    lf = rng.uniform(0.4, 1.15, (variants, net.n_bus))
    ratio = (lf * load.real).sum(axis=1) / max(load.real.sum(), 1e-9)
    pv = case.pv.to_numpy(bool)
    spread = np.where(pv, rng.uniform(0.8, 1.2, (variants, net.n_bus)),
                      rng.uniform(0.0, 2.0, (variants, net.n_bus)))  # PQ units: wind, small hydro
    gf = ratio[:, None] * spread
    s = gen[None, :] * gf - load[None, :] * lf
    res = solve_power_flow_batch(net, s.real, s.imag, case.v_set.to_numpy(float),
                                 case.pv.to_numpy(bool), max_iter=15)
    vm = np.vstack([base.vm[None, :], res.vm[res.converged]])
    va = np.vstack([base.va_rad[None, :], res.va_rad[res.converged]])
    v = vm * np.exp(1j * va)
    s_from, s_to = branch_end_power(net, v)
    s_bus = bus_injection(net, v)
    need = []
    for flows in (s_from, s_to, s_bus):
        mva = np.abs(flows) * net.base_mva
        need.append(np.maximum(headroom * mva[0], 1.5 * mva.max(axis=0)))
    need[2] = np.maximum(need[2], headroom * np.maximum(np.abs(load), np.abs(gen)))
    return need[0], need[1], need[2]


def make_point_list(
    case: GridCase, *, options: MeteringOptions | None = None, seed: int = 0
) -> pd.DataFrame:
    """A point list for ``case`` (DataFrame indexed by tag, columns :data:`POINT_COLUMNS`)."""
    opts = options or MeteringOptions()
    rng = np.random.default_rng(seed)
    net = case.network
    buses = net.buses
    sub = buses["substation"].astype(str)
    kv = buses["kv"].astype(float)
    s_from, s_to, s_bus = _sizing_flows(case, opts.headroom, rng)
    unmetered = _pick_unmetered(case, opts, rng)
    full = {str(s) for s in opts.fully_metered_substations}
    namer = _Namer()
    rows: list[dict] = []

    def add_device(bus: str, bay: str, quantities, element, end, mva: float, cls: float) -> None:
        code, kvl = substation_code(sub[bus]), kv_label(kv[bus])
        amps = mva * 1000.0 / (np.sqrt(3.0) * kv[bus])
        prim, ratio = choose_ct(amps, 1.0)
        fs_mw = _sig3(np.sqrt(3.0) * kv[bus] * prim / 1000.0)
        for qty in quantities:
            rows.append({
                "tag": f"{code}.{kvl}.{bay}.{MEASURAND[qty]}", "quantity": qty,
                "element": element, "end": end, "unit": UNIT[qty],
                "full_scale": prim if qty == "i_magnitude" else fs_mw, "accuracy_pct": cls,
                "substation": sub[bus], "device": f"{code}.{kvl}.{bay}", "ct_ratio": ratio,
                "vt_ratio": _vt_ratio(kv[bus], net.frequency_hz),
            })

    # Branch ends.
    br = net.branches
    t_number: dict[tuple[str, str], int] = {}
    bay_of_end: dict[tuple[str, str], tuple[str, str]] = {}
    for pos, (bid, row) in enumerate(br.iterrows()):
        ends = {"from": str(row["from_bus"]), "to": str(row["to_bus"])}
        eligible = [e for e, b in ends.items() if sub[b] not in unmetered]
        metered = [e for e in eligible
                   if rng.random() < opts.branch_end_coverage or sub[ends[e]] in full]
        if not metered and eligible and not opts.independent_ends:
            metered = [eligible[int(rng.integers(len(eligible)))]]
        for end, bus in ends.items():
            other = ends["to" if end == "from" else "from"]
            code, kvl = substation_code(sub[bus]), kv_label(kv[bus])
            if row["kind"] == "transformer":
                key = (sub[bus], bid)
                if key not in t_number:  # both ends in one substation share the number
                    t_number[key] = namer.next(sub[bus], "", "T")
                side = ("H" if kv[bus] > kv[other] else "L") if kv[bus] != kv[other] else (
                    "A" if end == "from" else "B")
                bay = f"T{t_number[key]}{side}"
            else:
                remote = substation_code(sub[other])
                n = namer.next(sub[bus], kvl, remote)
                bay = f"{remote}-{n}" if remote[-1].isdigit() else f"{remote}{n}"
            bay_of_end[(bid, end)] = (bus, bay)
            if end not in metered:
                continue
            qtys = list(FLOW_QUANTITIES)
            if rng.random() < opts.current_share or sub[bus] in full:
                qtys.append("i_magnitude")
            mva = s_from[pos] if end == "from" else s_to[pos]
            add_device(bus, bay, qtys, bid, end, mva, _accuracy(kv[bus], rng))
        if opts.status_points:
            for end in ("from", "to"):
                bus, bay = bay_of_end[(bid, end)]
                if sub[bus] in unmetered:
                    continue
                code, kvl = substation_code(sub[bus]), kv_label(kv[bus])
                rows.append({
                    "tag": f"{code}.{kvl}.{bay}.CB", "quantity": "branch_status",
                    "element": bid, "end": "", "unit": "status", "full_scale": np.nan,
                    "accuracy_pct": np.nan, "substation": sub[bus],
                    "device": "" if opts.bare_status_points else f"{code}.{kvl}.{bay}",
                })
                break

    # Bus injections and busbar voltages.
    gens, loads = set(case.generator_buses), set(case.load_buses)
    metered_subs = sorted({sub[b] for b in buses.index if sub[b] not in unmetered})
    v_done: set[str] = set()
    for b_pos, bus in enumerate(buses.index):
        if sub[bus] in unmetered:
            continue
        code, kvl = substation_code(sub[bus]), kv_label(kv[bus])
        dense = sub[bus] in full
        if (bus in gens or bus in loads) and (rng.random() < opts.injection_coverage or dense):
            kind = "GEN" if bus in gens else "LOAD"
            bay = f"{kind}{namer.next(sub[bus], kvl, kind)}"
            mva = max(s_bus[b_pos], 0.05 * net.base_mva)
            add_device(bus, bay, list(INJECTION_QUANTITIES), bus, "", mva,
                       _accuracy(kv[bus], rng))
        if rng.random() < opts.voltage_coverage or dense:
            _add_voltage(rows, namer, bus, code, kvl, kv[bus], sub[bus], net.frequency_hz, rng)
            v_done.add(sub[bus])
    for s in metered_subs:
        if s not in v_done:
            bus = sub.index[sub == s][int(np.argmax(kv[sub == s].to_numpy()))]
            _add_voltage(rows, namer, bus, substation_code(s), kv_label(kv[bus]), kv[bus], s,
                         net.frequency_hz, rng)
    return _finish(rows, opts, list(sub.unique()))


def _add_voltage(rows, namer, bus, code, kvl, kv, sub, frequency_hz, rng) -> None:
    bay = f"BB{namer.next(sub, kvl, 'BB')}"
    rows.append({
        "tag": f"{code}.{kvl}.{bay}.KV", "quantity": "v_magnitude", "element": bus, "end": "",
        "unit": "kV", "full_scale": _sig3(1.2 * kv), "accuracy_pct": float(rng.choice([0.2, 0.5])),
        "substation": sub, "device": f"{code}.{kvl}.{bay}", "ct_ratio": "",
        "vt_ratio": _vt_ratio(kv, frequency_hz),
    })


def _finish(rows: list[dict], opts: MeteringOptions, sub_order: list[str]) -> pd.DataFrame:
    pts = pd.DataFrame(rows)
    if pts["tag"].duplicated().any():
        dup = pts.loc[pts["tag"].duplicated(), "tag"].tolist()
        raise ValueError(f"tag convention produced duplicate tags: {dup[:5]}")
    commissioning = {str(s) for s in opts.commissioning_substations}
    pts["note"] = np.where(pts["substation"].isin(commissioning), "commissioning", "")
    rank = {s: i for i, s in enumerate(sub_order)}
    pts["_new"] = pts["substation"].isin(commissioning)
    pts["_sub"] = pts["substation"].map(rank)
    pts["_dev"] = pts.groupby("device", sort=False).ngroup()
    pts["_row"] = np.arange(len(pts))
    pts = pts.sort_values(["_new", "_sub", "_dev", "_row"], kind="stable")
    pts["rtu"] = "RTU-" + pts["substation"].map(substation_code)
    pts["channel"] = pts.groupby("rtu").cumcount() + 1
    pts["sigma"] = np.nan
    for col in REPORTING_COLUMNS:
        pts[col] = np.nan  # inferred from the data unless a caller states them
    for col in ("end", "ct_ratio", "vt_ratio"):
        pts[col] = pts[col].fillna("")
    pts.loc[pts["quantity"] == "branch_status", "vt_ratio"] = ""
    return pts.set_index("tag")[POINT_COLUMNS]
