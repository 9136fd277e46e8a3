"""A series stored by exception, for the tests of deadbands (test helper).

The storage rule is the usual report-by-exception one: a new value is stored when it moves
more than the deadband from the last stored value; in between the historian repeats the last
stored value (common practice, no source). Written here independently of the simulator's
``hold_within_deadband``, which works on whole point lists.
"""

from __future__ import annotations

import numpy as np


def by_exception(x: np.ndarray, deadband: float) -> np.ndarray:
    """``x`` as the historian stores it with ``deadband``."""
    out = np.empty_like(x)
    last = x[0]
    for i, v in enumerate(x):
        if abs(v - last) > deadband:
            last = v
        out[i] = last
    return out
