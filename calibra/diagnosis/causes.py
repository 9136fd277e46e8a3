"""Likely causes of a scale error: ratios of standard CT taps, √3 for a VT connection, units.

CT taps: IEEE C57.13 multi-ratio CTs (5 A secondary) and common single ratios — see shared
REFERENCES.md [R for the multi-ratio lists, M for the single ratios].
"""

from __future__ import annotations

import itertools
import math

from calibra.model.points import parse_ratio

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


def _tap_pairs():
    primaries = sorted({p for taps in MULTI_RATIO_TAPS.values() for p in taps}
                       | set(SINGLE_RATIO_PRIMARIES))
    return [(a, b) for a, b in itertools.permutations(primaries, 2)]


_PAIRS = _tap_pairs()


def likely_scale_cause(factor: float, quantity: str, ct_ratio: str | None = None) -> str:
    """Plain-language guess of what makes a point read ``factor`` × the true value."""
    k = abs(factor)
    if k == 0 or not math.isfinite(k):
        return ""
    for value, text in ((math.sqrt(3), "VT connection: line-to-neutral voltage taken as "
                         "line-to-line (or the reverse) — a factor of √3"),
                        (1 / math.sqrt(3), "VT connection: line-to-line voltage taken as "
                         "line-to-neutral (or the reverse) — a factor of 1/√3")):
        if quantity in ("v_magnitude", "p_flow", "q_flow", "p_injection", "q_injection") \
                and abs(k / value - 1) < _TOLERANCE:
            return text
    for value, text in ((1000.0, "units: kilo- read as base unit (×1000)"),
                        (1e-3, "units: base unit read as kilo- (÷1000)")):
        if abs(k / value - 1) < _TOLERANCE:
            return text
    if quantity == "v_magnitude":
        return ""
    configured = None
    try:
        ratio = parse_ratio(ct_ratio) if ct_ratio else None
        if ratio:
            configured = ratio * 5.0 if ratio * 5.0 >= 5 else None
    except ValueError:
        configured = None
    if configured:
        # Reading = true × configured/actual when the CT is wired on another tap.
        actual = configured / k
        best = min((p for pair in _PAIRS for p in pair), key=lambda p: abs(p / actual - 1))
        if abs(best / actual - 1) < _TOLERANCE:
            return (f"CT ratio: point list says {int(configured)}:5, the readings fit a "
                    f"{int(best)}:5 tap (factor {configured / best:.3g})")
    best_pair = min(_PAIRS, key=lambda ab: abs((ab[0] / ab[1]) / k - 1))
    if abs((best_pair[0] / best_pair[1]) / k - 1) < _TOLERANCE:
        return (f"CT ratio: factor {k:.3g} equals the ratio of standard taps "
                f"{best_pair[0]}:5 and {best_pair[1]}:5")
    return ""
