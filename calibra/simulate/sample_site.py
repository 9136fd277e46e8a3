"""The bundled sample site: the Tarrowmere regional grid (invented), one week of telemetry.

Tarrowmere is a made-up region: 15 substations and 40 buses at 220, 110 and 33 kV, two
thermal stations and a hydro station, a wind farm, an aluminium smelter on the 220 kV grid,
and Norrance, a new 110/33 kV substation being commissioned (its points come last in the
point list, noted ``commissioning``). Drummel is a small 33 kV substation without an RTU, fed
radially from Ulvenholm, so the meters of that feeder are critical.

Regenerate the bundled folder (about ten seconds on two cores) with::

    python -m calibra.simulate.sample_site --out sample_site --seed 7

Line impedances are typical per-kilometre values for overhead lines of each voltage level and
transformer impedances typical short-circuit voltages for their ratings (common practice, no
source), on a 100 MVA base.
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

import numpy as np
import pandas as pd

from calibra.diagnosis.findings import FindingKind
from calibra.model.network import Network
from calibra.model.points import FLOW_QUANTITIES, INJECTION_QUANTITIES
from calibra.simulate.case import GridCase
from calibra.simulate.faultmix import wrong_ct_taps
from calibra.simulate.faults import FaultSpec
from calibra.simulate.metering import CT_SECONDARY_A, MeteringOptions, make_point_list
from calibra.simulate.profiles import PlannedOutage
from calibra.simulate.telemetry import SimulationResult, TelemetryOptions, simulate_site
from calibra.simulate.writer import write_site

SITE_NAME = "Tarrowmere regional grid"
TIMEZONE = "Europe/Oslo"
START_LOCAL = "2027-03-01 00:00"  # a Monday; no daylight-saving change in the week
PERIODS = 7 * 24 * 60
BASE_MVA = 100.0
COMMISSIONING = "NRC"

SUBSTATIONS = {
    "VSM": "Vossmark power station", "KRH": "Karholt power station", "HNW": "Harnwick",
    "QLN": "Quillon", "EBB": "Ebberley Cross switching station", "TLV": "Talvesk",
    "MRG": "Morrowgate", "SNK": "Sennick Falls hydro", "PLB": "Pellbrook",
    "CRV": "Corvane switching station", "ULV": "Ulvenholm", "DRM": "Drummel",
    "FNR": "Fennick Ridge wind farm", "BRN": "Brasket", "NRC": "Norrance",
}
# bus: (kV, description)
BUSES = {
    "VSM_220": (220, "busbar"), "KRH_220": (220, "busbar"), "KRH_110": (110, "busbar"),
    "HNW_220": (220, "busbar"), "HNW_X1": (220, "T1 star point"), "HNW_X2": (220, "T2 star point"),
    "HNW_110A": (110, "section A"), "HNW_110B": (110, "section B"),
    "HNW_33A": (33, "section A"), "HNW_33B": (33, "section B"),
    "QLN_220": (220, "busbar"), "QLN_X1": (220, "T1 star point"), "QLN_X2": (220, "T2 star point"),
    "QLN_110": (110, "busbar"), "QLN_33": (33, "busbar"), "EBB_220": (220, "busbar"),
    "TLV_110A": (110, "section A"), "TLV_110B": (110, "section B"),
    "TLV_33A": (33, "section A"), "TLV_33B": (33, "section B"),
    "MRG_110": (110, "busbar"), "MRG_33A": (33, "section A"), "MRG_33B": (33, "section B"),
    "SNK_110": (110, "busbar"), "SNK_33": (33, "busbar"), "PLB_110": (110, "busbar"),
    "PLB_33A": (33, "section A"), "PLB_33B": (33, "section B"), "CRV_110": (110, "busbar"),
    "ULV_110": (110, "busbar"), "ULV_33": (33, "busbar"), "DRM_33": (33, "busbar"),
    "FNR_110": (110, "busbar"), "FNR_33": (33, "collector busbar"), "BRN_110": (110, "busbar"),
    "BRN_33A": (33, "section A"), "BRN_33B": (33, "section B"), "NRC_110": (110, "busbar"),
    "NRC_33A": (33, "section A"), "NRC_33B": (33, "section B"),
}
# kV: (r Ω/km, x Ω/km, charging susceptance µS/km) of typical overhead lines
LINE_TYPES = {220: (0.055, 0.33, 3.5), 110: (0.12, 0.39, 2.9), 33: (0.19, 0.36, 3.3)}
# branch: (from bus, to bus, km)
LINES = {
    "VSM-EBB-1": ("VSM_220", "EBB_220", 45), "VSM-EBB-2": ("VSM_220", "EBB_220", 45),
    "EBB-HNW": ("EBB_220", "HNW_220", 60), "EBB-QLN": ("EBB_220", "QLN_220", 70),
    "VSM-QLN": ("VSM_220", "QLN_220", 110), "KRH-HNW": ("KRH_220", "HNW_220", 55),
    "KRH-QLN": ("KRH_220", "QLN_220", 85), "HNW-TLV": ("HNW_110A", "TLV_110A", 28),
    "HNW-CRV": ("HNW_110A", "CRV_110", 22), "HNW-MRG": ("HNW_110B", "MRG_110", 35),
    "CRV-PLB": ("CRV_110", "PLB_110", 18), "CRV-SNK": ("CRV_110", "SNK_110", 30),
    "QLN-ULV-1": ("QLN_110", "ULV_110", 25), "QLN-ULV-2": ("QLN_110", "ULV_110", 25),
    "QLN-BRN": ("QLN_110", "BRN_110", 40), "KRH-TLV": ("KRH_110", "TLV_110B", 32),
    "SNK-ULV": ("SNK_110", "ULV_110", 38), "FNR-TLV": ("FNR_110", "TLV_110B", 20),
    "BRN-MRG": ("BRN_110", "MRG_110", 45), "PLB-NRC": ("PLB_110", "NRC_110", 16),
    "MRG-NRC": ("MRG_110", "NRC_110", 24), "ULV-DRM": ("ULV_33", "DRM_33", 12),
    "TLV-PLB": ("TLV_33B", "PLB_33A", 15),
}
# Two-winding transformers: (HV bus, LV bus, MVA, short-circuit voltage %, copper loss %, tap)
TRANSFORMERS = {
    "KRH-T1": ("KRH_220", "KRH_110", 200, 12.0, 0.30, 1.0),
    "TLV-T1": ("TLV_110A", "TLV_33A", 63, 11.0, 0.50, 0.9625),
    "TLV-T2": ("TLV_110B", "TLV_33B", 63, 11.0, 0.50, 1.0),
    "MRG-T1": ("MRG_110", "MRG_33A", 40, 10.5, 0.60, 0.9875),
    "MRG-T2": ("MRG_110", "MRG_33B", 40, 10.5, 0.60, 0.975),
    "SNK-T1": ("SNK_110", "SNK_33", 31.5, 10.0, 0.60, 1.0),
    "PLB-T1": ("PLB_110", "PLB_33A", 40, 10.5, 0.60, 0.975),
    "PLB-T2": ("PLB_110", "PLB_33B", 40, 10.5, 0.60, 0.9875),
    "ULV-T1": ("ULV_110", "ULV_33", 63, 11.0, 0.50, 0.975),
    "ULV-T2": ("ULV_110", "ULV_33", 63, 11.0, 0.50, 0.975),
    "FNR-T1": ("FNR_110", "FNR_33", 80, 11.0, 0.45, 1.0),
    "BRN-T1": ("BRN_110", "BRN_33A", 31.5, 10.0, 0.60, 0.9875),
    "BRN-T2": ("BRN_110", "BRN_33B", 31.5, 10.0, 0.60, 0.9875),
    "NRC-T1": ("NRC_110", "NRC_33A", 40, 10.5, 0.60, 0.975),
    "NRC-T2": ("NRC_110", "NRC_33B", 40, 10.5, 0.60, 0.9875),
}
# Three-winding 220/110/33 kV units as star equivalents: (HV, star, MV, LV, HV tap),
# star-branch impedances (r, x) in pu on 100 MVA for the HV, MV and LV windings.
THREE_WINDING = {
    "HNW-T1": ("HNW_220", "HNW_X1", "HNW_110A", "HNW_33A", 0.975),
    "HNW-T2": ("HNW_220", "HNW_X2", "HNW_110B", "HNW_33B", 0.975),
    "QLN-T1": ("QLN_220", "QLN_X1", "QLN_110", "QLN_33", 0.975),
    "QLN-T2": ("QLN_220", "QLN_X2", "QLN_110", "QLN_33", 0.975),
}
STAR_IMPEDANCE = {"H": (0.0008, 0.034), "M": (0.0004, 0.014), "L": (0.006, 0.266)}
SHUNTS_MVAR = {"QLN_33": 20, "MRG_33A": 8, "PLB_33B": 6, "ULV_33": 10, "BRN_33A": 5,
               "DRM_33": 3}
# bus: (peak MW, power factor, weights of residential / commercial / industrial shapes)
LOADS = {
    "QLN_220": (140, 0.96, (0, 0, 1)), "KRH_110": (25, 0.95, (0.3, 0.3, 0.4)),
    "TLV_110A": (18, 0.93, (0, 0.1, 0.9)), "ULV_110": (12, 0.97, (0.2, 0.6, 0.2)),
    "BRN_110": (8, 0.97, (0.2, 0.6, 0.2)), "HNW_33A": (35, 0.95, (0.5, 0.4, 0.1)),
    "HNW_33B": (30, 0.95, (0.6, 0.3, 0.1)), "QLN_33": (30, 0.93, (0.3, 0.3, 0.4)),
    "TLV_33A": (32, 0.95, (0.3, 0.6, 0.1)), "TLV_33B": (22, 0.95, (0.6, 0.3, 0.1)),
    "MRG_33A": (20, 0.94, (0.5, 0.3, 0.2)), "MRG_33B": (18, 0.94, (0.6, 0.2, 0.2)),
    "SNK_33": (10, 0.95, (0.8, 0.2, 0)), "PLB_33A": (24, 0.95, (0.4, 0.4, 0.2)),
    "PLB_33B": (20, 0.95, (0.5, 0.3, 0.2)), "ULV_33": (40, 0.94, (0.4, 0.4, 0.2)),
    "DRM_33": (9, 0.96, (0.8, 0.2, 0)), "BRN_33A": (20, 0.95, (0.6, 0.3, 0.1)),
    "BRN_33B": (16, 0.95, (0.5, 0.4, 0.1)), "NRC_33A": (16, 0.95, (0.7, 0.3, 0)),
    "NRC_33B": (12, 0.95, (0.5, 0.5, 0)),
}
# bus: (base MW, voltage set point pu or None for a PQ unit)
GENERATORS = {"VSM_220": (250, 1.035), "KRH_220": (180, 1.03), "SNK_110": (70, 1.02),
              "FNR_33": (30, None)}
WIND_MW = {"FNR_33": 60.0}
SLACK = "VSM_220"


def tarrowmere_network() -> Network:
    """The invented Tarrowmere grid as a :class:`Network`."""
    gen_or_load = set(LOADS) | set(GENERATORS)
    buses = pd.DataFrame(
        {
            "substation": [b.split("_")[0] for b in BUSES],
            "kv": [float(kv) for kv, _ in BUSES.values()],
            "zero_injection": [b not in gen_or_load and b not in SHUNTS_MVAR for b in BUSES],
            "g_shunt_mw": 0.0,
            "b_shunt_mvar": [float(SHUNTS_MVAR.get(b, 0.0)) for b in BUSES],
            "name": [f"{SUBSTATIONS[b.split('_')[0]]} {kv} kV {what}"
                     for b, (kv, what) in BUSES.items()],
        },
        index=pd.Index(list(BUSES), name="bus"),
    )
    rows = {}
    for bid, (f, t, km) in LINES.items():
        kv = BUSES[f][0]
        r, x, c = LINE_TYPES[kv]
        z_base = kv**2 / BASE_MVA
        b = c * 1e-6 * km * z_base
        rows[bid] = (f, t, r * km / z_base, x * km / z_base, b, 1.0, "line", f"{km} km line")
    for bid, (f, t, mva, uk, ur, tap) in TRANSFORMERS.items():
        r = ur / 100 * BASE_MVA / mva
        x = np.sqrt((uk / 100) ** 2 - (ur / 100) ** 2) * BASE_MVA / mva
        rows[bid] = (f, t, r, x, 0.0, tap, "transformer", f"{mva:g} MVA transformer")
    for unit, (hv, star, mv, lv, tap) in THREE_WINDING.items():
        for wdg, (f, t, tp) in {"H": (hv, star, tap), "M": (star, mv, 1.0),
                                "L": (star, lv, 1.0)}.items():
            r, x = STAR_IMPEDANCE[wdg]
            rows[f"{unit}{wdg}"] = (f, t, r, x, 0.0, tp, "transformer",
                                    f"{unit} 220/110/33 kV unit, {wdg} winding")
    branches = pd.DataFrame.from_dict(
        rows, orient="index",
        columns=["from_bus", "to_bus", "r", "x", "b", "tap", "kind", "name"],
    )
    branches.insert(6, "shift_deg", 0.0)
    branches.insert(8, "in_service", True)
    branches.index.name = "branch"
    for col in ("r", "x", "b"):
        branches[col] = branches[col].round(6)
    return Network("tarrowmere", BASE_MVA, buses, branches, SLACK, 50.0)


def tarrowmere_case() -> GridCase:
    """The grid with its peak-load operating point."""
    net = tarrowmere_network()
    load_mw = pd.Series({b: v[0] for b, v in LOADS.items()}, dtype=float)
    load_mvar = pd.Series({b: v[0] * np.tan(np.arccos(v[1])) for b, v in LOADS.items()})
    gen_mw = pd.Series({b: v[0] for b, v in GENERATORS.items()}, dtype=float)
    v_set = pd.Series({b: v[1] for b, v in GENERATORS.items() if v[1] is not None})
    pv = pd.Series({b: v[1] is not None and b != SLACK for b, v in GENERATORS.items()})
    return GridCase(net, load_mw, load_mvar, gen_mw, pd.Series(dtype=float), v_set, pv)


def _mix(net: Network) -> np.ndarray:
    mix = np.full((net.n_bus, 3), 1.0 / 3.0)
    for bus, (_, _, weights) in LOADS.items():
        mix[net.bus_positions([bus])[0]] = np.asarray(weights, float) + 1e-9
    return mix


def _local(text: str) -> pd.Timestamp:
    return pd.Timestamp(text).tz_localize(TIMEZONE).tz_convert("UTC")


def _tag(points: pd.DataFrame, quantity: str, element: str, end: str = "") -> str | None:
    hit = points.index[(points["quantity"] == quantity) & (points["element"] == element)
                       & (points["end"] == end)]
    return str(hit[0]) if len(hit) else None


def _device_tags(points: pd.DataFrame, element: str, end: str, quantities) -> tuple[str, ...]:
    tags = [_tag(points, q, element, end) for q in quantities]
    return tuple(t for t in tags if t)


def sample_faults(points: pd.DataFrame) -> list[FaultSpec]:
    """The seeded faults of the sample week (most of them at the Norrance commissioning)."""
    pq = FLOW_QUANTITIES
    ct = _device_tags(points, "NRC-T2", "to", pq + ("i_magnitude",))
    configured, wired = min(
        wrong_ct_taps(points.at[ct[0], "ct_ratio"], (1.3, 2.5)),
        key=lambda pair: abs(pair[0] / pair[1] - 1.5),
    )
    faults = [
        FaultSpec(FindingKind.REVERSED, _device_tags(points, "PLB-NRC", "to", pq), factor=-1.0,
                  detail="CT polarity reversed at the new line bay"),
        FaultSpec(FindingKind.REVERSED, (_tag(points, "q_flow", "NRC-T1", "from"),), factor=-1.0,
                  detail="reactive power channel wired with reversed polarity"),
        FaultSpec(FindingKind.REVERSED, _device_tags(points, "NRC_33A", "", INJECTION_QUANTITIES),
                  factor=-1.0, detail="feeder metered with the load sign convention"),
        FaultSpec(FindingKind.SCALE, ct, factor=configured / wired,
                  detail=f"CT wired on the {wired}:{CT_SECONDARY_A} tap, "
                         f"configured {configured}:{CT_SECONDARY_A}"),
        FaultSpec(FindingKind.SCALE, (_tag(points, "v_magnitude", "NRC_110"),),
                  factor=1 / np.sqrt(3),
                  detail="VT connected line-to-neutral, configured line-to-line"),
        FaultSpec(FindingKind.MISMAPPED, _device_tags(points, "MRG-NRC", "to", pq),
                  detail="P and Q inputs swapped in the RTU configuration"),
        FaultSpec(FindingKind.NOISY, (_tag(points, "p_flow", "NRC-T1", "to"),), noise_factor=5.0,
                  detail="loose connection on the transducer"),
        FaultSpec(FindingKind.REVERSED,
                  _first_device(points, [("BRN-MRG", "from"), ("HNW-TLV", "to"),
                                         ("SNK-ULV", "to")]),
                  factor=-1.0, detail="CT polarity reversed after a relay replacement"),
        FaultSpec(FindingKind.OFFSET,
                  (_first(points, "p_flow", [("QLN-BRN", "from"), ("QLN-BRN", "to"),
                                             ("KRH-TLV", "to")]),),
                  offset=4.0, detail="transducer zero shifted"),
        FaultSpec(FindingKind.DRIFT,
                  (_first(points, "p_flow", [("TLV-T1", "from"), ("TLV-T1", "to"),
                                             ("HNW-TLV", "to")]),),
                  drift_per_day=1.2, onset=_local("2027-03-03 14:20"),
                  detail="transducer drifting (ageing reference)"),
        FaultSpec(FindingKind.DRIFT, (_tag(points, "v_magnitude", "PLB_110")
                                      or _first(points, "q_flow", [("CRV-PLB", "to")]),),
                  drift_per_day=-0.9, onset=_local("2027-03-05 06:45"),
                  detail="transducer drifting (temperature)"),
        FaultSpec(FindingKind.STUCK,
                  (_first(points, "p_flow", [("CRV-SNK", "to"), ("CRV-SNK", "from"),
                                             ("SNK-ULV", "from")]),),
                  onset=_local("2027-03-04 10:17"), detail="value frozen after an RTU restart"),
    ]
    for spec in faults:
        if not spec.tags or None in spec.tags:
            raise ValueError(f"sample fault without its point in the point list: {spec}")
    return faults


def _first(points: pd.DataFrame, quantity: str, candidates) -> str | None:
    for element, end in candidates:
        tag = _tag(points, quantity, element, end)
        if tag:
            return tag
    return None


def _first_device(points: pd.DataFrame, candidates) -> tuple[str, ...]:
    for element, end in candidates:
        tags = _device_tags(points, element, end, FLOW_QUANTITIES)
        if len(tags) == 2:
            return tags
    return ()


def sample_points(case: GridCase, seed: int) -> pd.DataFrame:
    """The Tarrowmere point list: Drummel has no RTU, Norrance is fully metered and new."""
    options = MeteringOptions(
        branch_end_coverage=0.85, current_share=0.3, injection_coverage=1.0,
        voltage_coverage=0.75, fully_metered_substations=(COMMISSIONING,),
        unmetered_substations=("DRM",), commissioning_substations=(COMMISSIONING,),
    )
    points = make_point_list(case, options=options, seed=seed)
    # Drummel hangs on Ulvenholm's 33 kV busbar, whose load feeders are not metered; the
    # Drummel feeder bay reports P and Q only (no current transducer). So nothing but those
    # two points sees Drummel: they are critical.
    drop = [_tag(points, "i_magnitude", "ULV-DRM", "from"),
            _tag(points, "p_injection", "ULV_33"), _tag(points, "q_injection", "ULV_33")]
    return points.drop([t for t in drop if t])


def simulate_sample(seed: int = 7, periods: int = PERIODS,
                    faults: bool = True) -> SimulationResult:
    """Simulate the Tarrowmere week (``periods`` one-minute snapshots from Monday 00:00);
    ``faults=False`` gives the same week without the seeded meter faults."""
    case = tarrowmere_case()
    points = sample_points(case, seed)
    outage = PlannedOutage("HNW-MRG", _local("2027-03-02 08:00"), _local("2027-03-02 14:00"))
    result = simulate_site(
        case, points, start=START_LOCAL, periods=periods, timezone=TIMEZONE, seed=seed,
        faults=sample_faults(points) if faults else False, outages=[outage], name=SITE_NAME,
        mix=_mix(case.network),
        wind_mw=WIND_MW, options=TelemetryOptions(rtu_outage="RTU-BRN", rtu_outage_hours=3.0),
    )
    if not faults:
        return result
    blind = result.redundancy.weak(0.1) & set(result.truth["tag"])
    if blind:
        raise ValueError(f"seeded faults on points without enough redundancy: {sorted(blind)}")
    if not result.redundancy.critical:
        raise ValueError("the sample point list has no critical point; Drummel should give one")
    return result


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description="Regenerate the Tarrowmere sample site folder.")
    parser.add_argument("--out", type=Path, default=Path("sample_site"))
    parser.add_argument("--seed", type=int, default=7)
    parser.add_argument("--periods", type=int, default=PERIODS)
    parser.add_argument("--no-faults", action="store_true",
                        help="the same week without the seeded meter faults (a clean reference)")
    args = parser.parse_args(argv)
    t0 = time.perf_counter()
    result = simulate_sample(args.seed, args.periods, faults=not args.no_faults)
    t1 = time.perf_counter()
    write_site(result.site, args.out, truth=result.truth)
    t2 = time.perf_counter()
    size = sum(p.stat().st_size for p in args.out.rglob("*") if p.is_file())
    print(
        f"{SITE_NAME}: {result.site.network.n_bus} buses, {result.site.network.n_branch} "
        f"branches, {len(result.site.points)} points, {len(result.site.snapshots)} snapshots; "
        f"{len(result.truth['fault'].unique())} faults on {len(result.truth)} points; "
        f"critical: {', '.join(result.redundancy.critical)}\n"
        f"simulated in {t1 - t0:.1f} s, written in {t2 - t1:.1f} s, {size / 1e6:.1f} MB "
        f"in {args.out}"
    )


if __name__ == "__main__":
    main()
