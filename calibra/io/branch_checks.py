"""Checks of branch parameters shared by ``network/branches.csv`` and the IEEE CDF reader.

Real network models have series capacitors (negative reactance), bus couplers with a tiny
impedance, phase-shifting transformers, off-nominal taps, parallel circuits and the star points
of three-winding transformers; all of them load. Only what cannot be modelled is an error (a
branch with r = x = 0), and only what a utility engineer would question is a warning.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from calibra.io.problems import ProblemLog

LINE = "line"
TRANSFORMER = "transformer"
SERIES_CAPACITOR = "series_capacitor"
#: Branch kinds by the (lower-case) word a file may use.
BRANCH_KINDS = {LINE: LINE, TRANSFORMER: TRANSFORMER, SERIES_CAPACITOR: SERIES_CAPACITOR}

#: Off-nominal tap ratios outside this range are unusual: on-load tap changers span about
#: ±10-20 % (REFERENCES.md: 0.625-1.25 % per step, ±8 to ±16 steps, common practice, no
#: source); published models stay within it (PEGASE 2869: 0.88-1.20).
USUAL_TAP = (0.8, 1.2)


@dataclass(frozen=True)
class BranchColumns:
    """The file's names of the columns the checks point at."""

    x: str = "x"
    b: str = "b"
    tap: str = "tap"
    kind: str = "kind"


def no_impedance_message(r_name: str = "r", x_name: str = "x") -> str:
    """Why a branch with r = x = 0 is refused, and what to do instead."""
    return (f"{r_name} and {x_name} are both zero: a branch without impedance cannot be modelled; "
            f"give a bus coupler a small reactance (for example {x_name} = 0.0001 pu, as "
            "published network models do) or merge its two buses into one")


def check_branch_parameters(
    file: str,
    rows: np.ndarray,
    values: dict[str, np.ndarray],
    log: ProblemLog,
    columns: BranchColumns = BranchColumns(),
) -> None:
    """Warnings for unusual but valid branch parameters.

    ``values`` holds aligned arrays ``r``, ``x``, ``b``, ``tap`` (1 for none), ``shift_deg``
    and ``kind``; ``rows`` the spreadsheet or card row of each. NaN cells and r = x = 0
    (already reported) and unknown kinds ("") are skipped. Nothing is said about the sign of r
    or b: network equivalents may have either.
    """
    r, x, b, tap, shift = (np.asarray(values[c], dtype=float)
                           for c in ("r", "x", "b", "tap", "shift_deg"))
    kind = np.asarray(values["kind"], dtype=object)
    low, high = USUAL_TAP
    for i in np.flatnonzero((tap > 0) & ((tap < low) | (tap > high))):  # <= 0: an error
        log.warning(file, int(rows[i]), columns.tap,
                    f"tap {tap[i]:g} is outside the usual {low:g}-{high:g}: check that it is "
                    "the off-nominal ratio in per unit on the from side, not a ratio of rated "
                    "voltages or a percentage")
    for i in np.flatnonzero((kind == SERIES_CAPACITOR) & (x >= 0) & ((r != 0) | (x != 0))):
        log.warning(file, int(rows[i]), columns.x,
                    f"a series capacitor has a negative reactance, but {columns.x} is "
                    f"{x[i]:g}: check the sign")
    # A line's own reactance is positive. A negative one on a branch without charging is a
    # series capacitor or a network equivalent written as a line (published models have
    # them); with line charging it is no capacitor: most likely a sign error.
    for i in np.flatnonzero((kind == LINE) & (x < 0) & (b > 0)):
        log.warning(file, int(rows[i]), columns.x,
                    f"negative reactance {x[i]:g} on a line with line charging "
                    f"({columns.b} = {b[i]:g}): "
                    "check the sign; a series capacitor belongs on a branch of its own "
                    f"(kind {SERIES_CAPACITOR})")
    # Only transformers have a tap or a phase shift (a CDF branch with either is one).
    odd = ((kind == LINE) | (kind == SERIES_CAPACITOR)) & ((tap != 1) | (shift != 0))
    for i in np.flatnonzero(odd & np.isfinite(tap + shift)):
        has = " and ".join(
            ([f"tap {tap[i]:g}"] if tap[i] != 1 else [])
            + ([f"phase shift {shift[i]:g} degrees"] if shift[i] != 0 else []))
        log.warning(file, int(rows[i]), columns.kind,
                    f"a {kind[i].replace('_', ' ')} has neither tap nor phase shift, but this "
                    f"branch has {has}, which the model applies; is it a {TRANSFORMER}?")
