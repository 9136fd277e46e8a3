"""Units tried by elimination (calibra.diagnosis.suspects._units)."""

from __future__ import annotations

import numpy as np

from calibra.diagnosis.suspects import _units


def test_a_device_is_tried_by_its_power_channels_and_by_all_its_channels():
    """One CT feeds a device's P, Q and |I| transducers: a reversed CT turns P and Q only, a
    wrong CT ratio scales all three (common practice, no source). Points 0-2 are one device's
    P, Q and |I|; 3 is a voltage; 4 a lone injection."""
    device_of = np.array([0, 0, 0, -1, 1])
    power = np.array([True, True, False, False, True])
    available = np.ones(5, bool)
    units = _units([2, 3, 4], device_of, available, power)
    assert [2] in units and [3] in units and [4] in units
    assert [0, 1] in units and [0, 1, 2] in units
    assert len(units) == 5  # no repeats; a device of one channel adds nothing
    # A channel that is not available (set aside, or no data) is not part of any unit.
    available[1] = False
    units = _units([0], device_of, available, power)
    assert units == [[0], [0, 2]]
