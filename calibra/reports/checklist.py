"""What a field crew should check for each kind of finding.

Each finding becomes a short list of checks in the order a crew would do them on site, made
specific with what the finding and the point list say (factor, CT/VT ratio, channel, unit).
The safety cautions in :mod:`calibra.reports.safety` come before all of these on the sheet.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping

from calibra.diagnosis.findings import FINDING_KINDS, FindingKind
from calibra.model.points import (
    CT_QUANTITIES,
    VT_QUANTITIES,
    quantity_of_words,
    quantity_words,
)
from calibra.reports._values import fmt, number, text, timestamp
from calibra.reports.tap_checks import TAP_CHECKS, TAP_LABELS

#: How each kind of finding is named on the checklist.
FINDING_LABELS = {
    FindingKind.REVERSED: "Reversed sign",
    FindingKind.SCALE: "Scale error",
    FindingKind.OFFSET: "Constant offset",
    FindingKind.DRIFT: "Drifting reading",
    FindingKind.STUCK: "Reading frozen",
    FindingKind.NOISY: "Erratic reading",
    FindingKind.MISMAPPED: "Reads another quantity",
    FindingKind.UNVERIFIABLE: "Cannot be checked remotely",
    FindingKind.TIME_OFFSET: "RTU clock offset",
    FindingKind.MODEL: "Network model parameter",
    **TAP_LABELS,
}

_SQRT3 = math.sqrt(3.0)


def checklist_items(finding_row: Mapping) -> list[str]:
    """Checks for one finding (a findings.csv row, optionally with point-list columns such as
    ``ct_ratio``, ``vt_ratio``, ``accuracy_pct``). Unknown kinds raise ``ValueError``."""
    kind = text(finding_row, "finding")
    if kind not in _CHECKS:
        raise ValueError(f"{text(finding_row, 'tag')}: unknown finding kind {kind!r}; "
                         f"known kinds are {', '.join(FINDING_KINDS)}")
    return _CHECKS[kind](finding_row)


def _channel(row: Mapping) -> str:
    channel, rtu = text(row, "channel"), text(row, "rtu")
    if channel and rtu:
        return f"channel {channel} of RTU {rtu}"
    if channel:
        return f"channel {channel}"
    return f"the channel of {text(row, 'tag') or 'this point'}"


def _reversed(row: Mapping) -> list[str]:
    if text(row, "scope") == "device":
        return [
            "CT polarity: check the P1/P2 marks on the primary and S1/S2 on the secondary "
            "against the connection drawing (positive = power flowing out of the bus into "
            "the branch).",
            "Secondary wiring at the transducer/IED terminals: check that S1 and S2 are not "
            "interchanged on any phase (CT secondary shorted at the test switch first).",
            "RTU/IED: check the sign convention set for these points (which direction counts "
            "as positive).",
        ]
    device = text(row, "device") or "the device"
    return [
        f"Configuration of {_channel(row)}: check the sign (inversion) and the scaling set "
        "for this point in the RTU or IED.",
        f"Only this point of {device} reads reversed: look at its configuration before the "
        "CT wiring, which the other points share.",
    ]


def _scale(row: Mapping) -> list[str]:
    quantity = text(row, "quantity")
    factor = number(row, "factor")
    unit = text(row, "unit")
    items = []
    if factor is not None:
        items.append(f"Readings are about {fmt(factor)} × the expected values: look for "
                     "the cause of exactly that ratio in the checks below.")
    if quantity in CT_QUANTITIES or not quantity:
        ct = text(row, "ct_ratio") or "none given"
        items.append(f"CT: read the ratio and the tap in use on the nameplate and compare "
                     f"them with the point list (CT ratio {ct}). A factor equal to the ratio "
                     "of two taps (e.g. 1200/800 = 1.5) means the wrong tap is set or wired.")
    if quantity in VT_QUANTITIES or not quantity:
        vt = text(row, "vt_ratio") or "none given"
        items.append(f"VT: read the ratio on the nameplate and compare it with the point list "
                     f"(VT ratio {vt}); check whether the input is connected and configured "
                     "line-to-line or line-to-neutral.")
    if factor is not None and any(abs(abs(factor) / r - 1.0) < 0.03
                                  for r in (_SQRT3, 1.0 / _SQRT3)):
        items.append("The factor is close to √3 (1.732) or 1/√3: a line-to-line versus "
                     "line-to-neutral mix-up is the likely cause.")
    ratios = {"v_magnitude": "VT ratio", "i_magnitude": "CT ratio"}.get(quantity,
                                                                        "CT and VT ratios")
    items += [
        f"Transducer/IED: check the {ratios} and the input and output ranges configured in "
        "it.",
        f"RTU: check the conversion of {_channel(row)} from raw counts to engineering units"
        f"{f' ({unit})' if unit else ''}, including the full-scale value.",
    ]
    return items


def _offset(row: Mapping) -> list[str]:
    offset, unit = number(row, "offset"), text(row, "unit")
    size = f" of about {offset:+.4g}{f' {unit}' if unit else ''}" if offset is not None else ""
    return [
        "Transducer/IED zero: compare its reading with a portable reference meter at the "
        f"same moment; a constant difference{size} confirms the offset.",
        "Recalibrate the zero (and then the span) of the transducer/IED following the "
        "maker's procedure.",
        f"RTU: check the zero of the scaling of {_channel(row)}, e.g. a 4–20 mA input "
        "scaled as if it started at 0 mA.",
    ]


def _drift(row: Mapping) -> list[str]:
    rate, unit = number(row, "drift_per_day"), text(row, "unit")
    onset = timestamp(row, "onset")
    growth = ""
    if rate is not None:
        growth = f"; the error grew by about {fmt(rate, 3)}{f' {unit}' if unit else ''} a day"
        if onset is not None:
            growth += f" from {onset:%Y-%m-%d}"
    accuracy = number(row, "accuracy_pct")
    limit = f" (class {fmt(accuracy, 3)} %)" if accuracy is not None else ""
    return [
        "Compare the reading with a portable reference meter at the same moment" + growth + ".",
        f"Calibrate the transducer/IED; replace it if its error is outside its accuracy "
        f"class{limit}.",
        "Look for causes of ageing: heat in the cubicle, loose or corroded terminals, an "
        "unstable auxiliary supply.",
    ]


def _stuck(row: Mapping) -> list[str]:
    return [
        "RTU/IED communication: check that the point updates (communication status, "
        "quality flags, time of the last change).",
        "Transducer output: measure the output signal and check that it follows the load.",
        f"Configuration of {_channel(row)}: check that the point is not substituted, set to "
        "a manual or frozen value, or given too wide a deadband.",
    ]


def _noisy(row: Mapping) -> list[str]:
    return [
        "Wiring: check the secondary and signal wiring for loose, corroded or damaged "
        "terminals and cables.",
        "Screens and earthing: check that cable screens are earthed as the drawing shows and "
        "that each instrument-transformer secondary circuit has its single ground point.",
        "Transducer/IED health: check the auxiliary supply and watch the output; replace "
        "the unit if it stays erratic.",
    ]


def _mismapped(row: Mapping) -> list[str]:
    tag, quantity, matched = text(row, "tag"), text(row, "quantity"), text(row, "matched")
    where = _measures(row)
    items = [f"Point mapping: check the RTU/IED address of {tag or 'this point'} against the "
             f"point list{f' (listed as the {where})' if where else ''}."]
    if _pq_crossed(quantity, matched):
        items.append("Active and reactive power look interchanged: check which channel "
                     "carries P and which carries Q, in the transducer/IED and in the RTU.")
    elif matched:
        items.append(f"The values match {matched} instead: look for that channel wired or "
                     "mapped to this point.")
    items.append("Control-centre database: check that the point is linked to the right "
                 "network element and end.")
    return items


def _measures(row: Mapping) -> str:
    """What the point list says the point measures, in words; a branch end is named by the
    point's own substation (where its meter is)."""
    quantity, element = text(row, "quantity"), text(row, "element")
    if not quantity or not element:
        return ""
    place = text(row, "substation") if text(row, "end") else ""
    return quantity_words(quantity, element, place)


def _pq_crossed(quantity: str, matched: str) -> bool:
    """The point reads the other of P and Q (``matched`` in the words of the findings)."""
    read = quantity_of_words(matched)
    return bool(read) and {quantity[:1], read[:1]} == {"p", "q"}


def _unverifiable(row: Mapping) -> list[str]:
    # findings name the meter to add as "add <meter>; until then …" (diagnosis.describe)
    action = text(row, "action")
    record = ("Write down the reference reading and the control-centre value at the same "
              "moment, so the difference can be judged.")
    if not action.startswith("add "):
        return ["Check the point in the field against a portable reference meter.", record]
    meter = action[len("add "):].partition(";")[0].strip()
    return [f"Metering: add {meter}, so that other meters check this point.",
            "Until then, check the point in the field against a portable reference meter.",
            record]


def _time_offset(row: Mapping) -> list[str]:
    """Checks of an RTU whose points all read late or early (for the RTU/SCADA engineer)."""
    rtu = text(row, "rtu") or text(row, "tag") or "the RTU"
    offset = number(row, "offset")
    how = ""
    if offset is not None:
        how = f" (the review puts it {abs(offset):,.0f} s {'late' if offset > 0 else 'early'})"
    return [
        f"Clock of {rtu}: compare it with the station's time reference (satellite clock, "
        f"IRIG-B, NTP or PTP source) and write down the difference as found{how}.",
        f"Time synchronisation of {rtu}: check the configured source, the time zone and the "
        "daylight-saving rule, and that the synchronisation is not failing.",
        "Time stamps: check whether the RTU stamps its values at the source or the master "
        "station stamps them on receipt (a polling cycle or a queue then delays them).",
        "After the clock is set right, record the time in the ledger as the repair, so the "
        "next review checks the data after it.",
    ]


#: What the model's owner checks for each kind of parameter (common practice, no source).
_MODEL_SOURCES = {
    "r": "the conductor's or winding's resistance on the datasheet or test report, the "
         "route length and the per-unit base",
    "x": "the line's or transformer's reactance on the datasheet or test report (for a "
         "transformer its impedance voltage on the nameplate), the route length and the "
         "per-unit base",
    "b": "the line's charging on the datasheet, the route length and any cable sections",
    "tap": "the tap position the transformer runs at (its tap position indication), the step "
           "size and the nominal ratio on the nameplate",
    "shift": "the phase shift on the nameplate (vector group or phase-shifter setting)",
    "shunt": "the reactor's or capacitor bank's rating and whether it is in service",
}


def _model(row: Mapping) -> list[str]:
    """Checks of a network-model parameter (for the model's owner, not the field crew)."""
    parameter = text(row, "parameter")
    element = text(row, "element") or text(row, "tag")
    model, estimate = number(row, "model_value"), number(row, "estimated_value")
    std = number(row, "estimated_std")
    values = ""
    if model is not None and estimate is not None:
        spread = f" ± {fmt(std, 3)}" if std is not None else ""
        values = f" (the model holds {fmt(model, 5)}, the meters fit {fmt(estimate, 5)}{spread})"
    source = _MODEL_SOURCES.get(parameter, "the datasheet, nameplate and as-built drawings")
    return [
        f"Model value of {parameter or 'the parameter'} of {element}{values}: compare it with "
        f"{source}.",
        "As-built drawings: check that the element in the model is the one built (route, "
        "conductor, transformer, connections).",
        "If the estimate is right, correct the model (the review's model-correction file, then "
        "the network model at its source); if the model is right, record that it is, so the "
        "meters around it are checked in the field instead.",
    ]


_CHECKS: dict[str, Callable[[Mapping], list[str]]] = {
    FindingKind.REVERSED: _reversed, FindingKind.SCALE: _scale, FindingKind.OFFSET: _offset,
    FindingKind.DRIFT: _drift, FindingKind.STUCK: _stuck, FindingKind.NOISY: _noisy,
    FindingKind.MISMAPPED: _mismapped, FindingKind.UNVERIFIABLE: _unverifiable,
    FindingKind.TIME_OFFSET: _time_offset, FindingKind.MODEL: _model,
    FindingKind.TIME_OFFSET: _time_offset, **TAP_CHECKS,
}
