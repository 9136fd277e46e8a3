"""Software corrections chosen from findings: one rule for the command line's
``calibra ledger SITE correct ITEM`` and the desktop's "correct whole device".

Each point is corrected once, by its first finding a correction can undo (reversed, scale or
offset, in the findings table's order): one CT polarity fix corrects P and Q of a device, and a
point with both a scale and an offset finding gets the first. The fitted factor or offset is
used unless the user gives one. A point of the device whose findings no correction undoes
(stuck, noisy...) is left for the field work and named; when no point can be corrected, or one
lacks the value its correction needs, nothing is written and the reason names the point.
"""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

from calibra.diagnosis.findings import (
    CORRECTABLE_KINDS,
    FACTOR_KINDS,
    MODEL_KINDS,
    RTU_KINDS,
    FindingKind,
)
from calibra.ledger.ledger import Ledger
from calibra.ledger.schema import LedgerError
from calibra.model.times import TimeLike


@dataclass(frozen=True)
class SoftwareFix:
    """The correction planned for one point: which finding it undoes and its value (the
    factor for reversed and scale, where None means a plain sign reversal; the offset)."""

    tag: str
    kind: FindingKind
    value: float | None

    def describe(self) -> str:
        """What the correction does, in the words the command line and the window print."""
        if self.kind == FindingKind.REVERSED and self.value is None:
            return f"{self.tag}: corrected in software (sign reversed)"
        if self.kind in FACTOR_KINDS:
            return f"{self.tag}: corrected in software (measured = {self.value:g} × true)"
        return f"{self.tag}: corrected in software (offset {self.value:g} removed)"


class ClockNotCorrectable(LedgerError):
    """An RTU clock or tap finding: set right in the RTU, the tap changer's indication or the
    model, then marked repaired."""

    def __init__(self, tag: str):
        super().__init__(f"{tag}: an RTU clock is set right in the RTU, not in software (a "
                         "tap finding: at the tap changer's indication or in the model); then "
                         "mark it repaired (the next review verifies it)")
        self.tag = tag


class ModelNotCorrectable(LedgerError):
    """A network-model finding: corrected in the model (model-corrections.csv), not in a
    meter's software correction."""

    def __init__(self, tag: str):
        super().__init__(f"{tag}: a network-model value is corrected in the model "
                         "(model-corrections.csv), not in a meter's software correction")
        self.tag = tag


@dataclass(frozen=True)
class FixPlan:
    """The corrections to record, and the points left as they are (no finding of theirs a
    correction undoes), each with the sentence that says so."""

    fixes: list[SoftwareFix]
    left: list[str]


def _not_correctable(tag: str, kinds: pd.Series) -> str:
    return (f"{tag}: {', '.join(map(str, kinds))} cannot be corrected in software (only "
            "reversed, scale and offset findings); confirm it for the field work")


def plan_fixes(rows: pd.DataFrame, factor: float | None = None,
               offset: float | None = None) -> FixPlan:
    """The corrections for the findings ``rows`` (columns tag, finding, factor, offset), one
    per point in tag order; ``factor``/``offset`` replace the fitted values. Raises
    :class:`LedgerError` naming the point when no point can be corrected or one lacks its
    value."""
    fixes, left = [], []
    for tag, group in rows.groupby("tag", sort=True):
        kinds = [FindingKind(k) for k in group["finding"] if k in CORRECTABLE_KINDS]
        if set(group["finding"]) <= set(RTU_KINDS):
            raise ClockNotCorrectable(str(tag))
        if set(group["finding"]) <= set(MODEL_KINDS):
            raise ModelNotCorrectable(str(tag))
        if not kinds:
            left.append(_not_correctable(str(tag), group["finding"]))
            continue
        kind = kinds[0]
        fitted = group[group["finding"] == kind].iloc[0]
        if kind == FindingKind.REVERSED and factor is None:
            fixes.append(SoftwareFix(str(tag), kind, None))
            continue
        name, given = ("factor", factor) if kind in FACTOR_KINDS else ("offset", offset)
        value = given if given is not None else fitted.get(name)
        if value is None or pd.isna(value):
            raise LedgerError(f"{tag}: the {kind} finding has no fitted {name}; give one")
        fixes.append(SoftwareFix(str(tag), kind, float(value)))
    if not fixes:
        raise LedgerError(left[0] if len(left) == 1 else
                          "no finding of these points can be corrected in software: "
                          + "; ".join(left))
    return FixPlan(fixes, left)


def apply_fixes(ledger: Ledger, plan: FixPlan, user: str | None = None,
                valid_from: TimeLike | None = None, note: str = "") -> list[int]:
    """Record the planned corrections in the ledger; their action ids."""
    done = []
    for fix in plan.fixes:
        if fix.kind == FindingKind.REVERSED and fix.value is None:
            done.append(ledger.mark_reversed(fix.tag, user, valid_from, note))
        elif fix.kind in FACTOR_KINDS:
            done.append(ledger.apply_scale(fix.tag, fix.value, user, valid_from, note))
        else:
            done.append(ledger.apply_offset(fix.tag, fix.value, user, valid_from, note))
    return done
