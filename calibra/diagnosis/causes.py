"""Likely causes of a scale error: ratios of standard CT taps, √3 for a VT connection, units.

CT taps: IEEE C57.13 multi-ratio CTs (5 A secondary) and common single ratios — see shared
REFERENCES.md [R for the multi-ratio lists, M for the single ratios].
"""

from __future__ import annotations

import itertools
import math

from calibra.model.points import VT_QUANTITIES, parse_ratio

#: IEEE C57.13 multi-ratio CT taps (primary amperes, 5 A secondary) [R].
MULTI_RATIO_TAPS = {
    600: (50, 100, 150, 200, 250, 300, 400, 450, 500, 600),
    1200: (100, 200, 300, 400, 500, 600, 800, 900, 1000, 1200),
    2000: (300, 400, 500, 800, 1100, 1200, 1500, 1600, 2000),
    3000: (300, 500, 800, 1000, 1200, 1500, 2000, 2200, 2500, 3000),
}
#: Common single-ratio CT primaries (amperes) [M].
SINGLE_RATIO_PRIMARIES = (50, 75, 100, 150, 200, 250, 300, 400, 500, 600, 800, 1000, 1200,
                          1500, 1600, 2000, 2500, 3000, 4000, 5000, 6000, 8000, 12000)

_TOLERANCE = 0.02
_STRONG_TOLERANCE = 0.01


def _tap_pairs():
    primaries = sorted({p for taps in MULTI_RATIO_TAPS.values() for p in taps}
                       | set(SINGLE_RATIO_PRIMARIES))
    return [(a, b) for a, b in itertools.permutations(primaries, 2)]


_PAIRS = _tap_pairs()


def scale_cause(factor: float, quantity: str, ct_ratio: str | None = None) -> tuple[str, bool]:
    """Plain-language guess of what makes a point read ``factor`` × the true value, and whether
    the match is strong (√3 or ×1000 within 2 %, or the configured CT ratio against another
    tap of a standard CT that has the configured one, within 1 %). A weak match only notes
    that the factor equals some ratio of two standard taps."""
    k = abs(factor)
    if k == 0 or not math.isfinite(k):
        return "", False
    for value, text in ((math.sqrt(3), "VT connection: line-to-neutral voltage taken as "
                         "line-to-line (or the reverse) — a factor of √3"),
                        (1 / math.sqrt(3), "VT connection: line-to-line voltage taken as "
                         "line-to-neutral (or the reverse) — a factor of 1/√3")):
        if quantity in VT_QUANTITIES and abs(k / value - 1) < _TOLERANCE:
            return text, True
    for value, text in ((1000.0, "units: kilo- read as base unit (×1000)"),
                        (1e-3, "units: base unit read as kilo- (÷1000)")):
        if abs(k / value - 1) < _TOLERANCE:
            return text, True
    if quantity == "v_magnitude":
        return "", False
    configured = _configured_primary(ct_ratio)
    if configured:
        # Reading = true × configured/actual when the CT is wired on another tap.
        actual = configured / k
        taps = _sibling_taps(configured)
        if taps:
            best = min(taps, key=lambda p: abs(p / actual - 1))
            if abs(best / actual - 1) < _STRONG_TOLERANCE:
                return (f"CT ratio: point list says {configured:g}:5, the readings fit the "
                        f"{best:g}:5 tap (factor {configured / best:.3g})"), True
    best_pair = min(_PAIRS, key=lambda ab: abs((ab[0] / ab[1]) / k - 1))
    if abs((best_pair[0] / best_pair[1]) / k - 1) < _STRONG_TOLERANCE:
        return (f"possibly a CT ratio: {k:.3g} is the ratio of standard taps "
                f"{best_pair[0]}:5 and {best_pair[1]}:5"), False
    return "", False


def likely_scale_cause(factor: float, quantity: str, ct_ratio: str | None = None) -> str:
    """The text of :func:`scale_cause`."""
    return scale_cause(factor, quantity, ct_ratio)[0]


def known_scale_cause(factor: float, quantity: str, ct_ratio: str | None = None) -> bool:
    """Whether :func:`scale_cause` finds a strong match."""
    return scale_cause(factor, quantity, ct_ratio)[1]


def _configured_primary(ct_ratio: str | None) -> float | None:
    try:
        ratio = parse_ratio(ct_ratio) if ct_ratio else None
    except ValueError:
        return None
    return ratio * 5.0 if ratio and ratio * 5.0 >= 5 else None


def _sibling_taps(primary: float) -> set[float]:
    """Other taps of the standard multi-ratio CTs that offer ``primary``; else single ratios."""
    taps: set[float] = set()
    for lst in MULTI_RATIO_TAPS.values():
        if any(abs(t - primary) < 1e-9 for t in lst):
            taps |= set(lst)
    if not taps:
        taps = set(SINGLE_RATIO_PRIMARIES)
    taps.discard(primary)
    return taps
