"""What the RTU/SCADA or protection and control engineer checks for a tap finding.

Tap findings go on the RTU and SCADA sheet (never a CT crew's checklist): the indication of a
tap changer's position, the model's step data, or a moving changer without telemetry. Each
check names what to compare; operating a tap changer is left to the utility's switching
procedures (the caution :data:`TAP_CAUTION` is printed with them).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping

from calibra.diagnosis.findings import FindingKind
from calibra.reports._values import number, text
from calibra.reports.safety import Caution

#: Printed on the RTU sheet when it carries a tap finding.
TAP_CAUTION = Caution(
    "Work on an on-load tap changer, its drive or its position transmitter only under the "
    "utility's switching and isolation procedures, as qualified personnel; a tap operation "
    "for a check is agreed with the control room first.",
    "employer's procedures; local codes")

#: How each tap finding is named on the sheet.
TAP_LABELS = {
    FindingKind.TAP_OFFSET: "Tap position offset",
    FindingKind.TAP_INVERTED: "Tap position counts the wrong way",
    FindingKind.TAP_FROZEN: "Tap position frozen",
    FindingKind.TAP_STEP_SIZE: "Tap step size in the model",
    FindingKind.TAP_UNREPORTED: "Tap changer moves without telemetry",
}


def _where(row: Mapping) -> str:
    return f"transformer {text(row, 'element') or text(row, 'tag')}"


def _record() -> str:
    return ("Record the step on the local indicator and in SCADA at the same moment, as found "
            "and as left.")


def _offset(row: Mapping) -> list[str]:
    n = number(row, "offset")
    by = f" by {n:+.0f} steps" if n is not None else ""
    return [f"Tap-position indication of {_where(row)}: compare the local indicator with the "
            f"SCADA value; the review finds SCADA reading{by}.",
            "Check the position transmitter's zero and the step numbering configured in the "
            "RTU and the SCADA database (neutral step, first step).", _record()]


def _inverted(row: Mapping) -> list[str]:
    return [f"Tap-position indication of {_where(row)}: after the next tap operation (by the "
            "control room or the voltage control), check that SCADA moves the same way as the "
            "local indicator.",
            "Check the raise/lower sense of the position transmitter's wiring and of the RTU "
            "and database scaling (a negative gain or reversed numbering).", _record()]


def _frozen(row: Mapping) -> list[str]:
    return [f"Tap-position input of {_where(row)}: check the RTU channel, its quality flags "
            "and whether a value is held or substituted in the RTU or database.",
            "Check the position transmitter and its supply; compare with the local indicator "
            "after the next tap operation.", _record()]


def _step_size(row: Mapping) -> list[str]:
    k = number(row, "factor")
    ratio = f" (the meters imply {k:.2f} × the modelled step)" if k is not None else ""
    return [f"Network model of {_where(row)}: check the voltage per step on the nameplate or "
            f"test report against tap_step_pct in network/branches.csv{ratio}.",
            "Check the neutral step and the tapped side in the model against the nameplate.",
            "Correct the model (the model owner), then review the week again."]


def _unreported(row: Mapping) -> list[str]:
    return [f"Tap changer of {_where(row)}: confirm in the station or from the control room "
            "that it operates on load (automatic voltage control in service).",
            "Add a tap-position point for it (position transmitter to an RTU input) and give "
            "its tap changer in network/branches.csv (tap_step_pct, tap_neutral, tap_side).",
            "Until then its meters are judged with the ratio the review implies; record the "
            "steps seen on the local indicator with their times."]


TAP_CHECKS: dict[str, Callable[[Mapping], list[str]]] = {
    FindingKind.TAP_OFFSET: _offset, FindingKind.TAP_INVERTED: _inverted,
    FindingKind.TAP_FROZEN: _frozen, FindingKind.TAP_STEP_SIZE: _step_size,
    FindingKind.TAP_UNREPORTED: _unreported,
}
