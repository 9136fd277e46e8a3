"""Corrections applied to snapshots: the algebra of the three error models, time windows.

Error models (the diagnosis's definitions; common practice, no source): reversed polarity
measured = −true; scale measured = k·true; offset measured = true + c. Correcting must give
back the true series exactly (to rounding).
"""

import numpy as np
import pandas as pd
import pytest

from calibra.ledger import Correction, apply_corrections
from tests.ledger.conftest import WEEK1, WEEK2, finding

TIMES = pd.date_range(WEEK1[0], WEEK2[1], freq="1h", inclusive="left")
REPAIR = pd.Timestamp("2026-03-11T10:00", tz="UTC")


def _true_series(seed: int = 4) -> pd.Series:
    rng = np.random.default_rng(seed)
    hours = np.arange(len(TIMES))
    return pd.Series(60 + 25 * np.sin(2 * np.pi * hours / 24) + rng.normal(0, 2, hours.size),
                     index=TIMES)


@pytest.mark.parametrize(("kind", "value", "measure"), [
    ("reversed", None, lambda y: -y),
    ("scale", 1.5, lambda y: 1.5 * y),          # e.g. 1200:5 read as 800:5 (IEEE C57.13 taps)
    ("scale", 1 / np.sqrt(3), lambda y: y / np.sqrt(3)),  # line-to-neutral read as line-to-line
    ("offset", -4.2, lambda y: y - 4.2),
])
def test_ledger_correction_gives_back_the_true_series(ledger, kind, value, measure):
    true = _true_series()
    healthy = true * 0.5
    raw = pd.DataFrame({"MC-L1-P": measure(true), "MC-L2-P": healthy})
    raw.iloc[5, 0] = np.nan
    ledger.record_review([finding("MC-L1-P", kind)], *WEEK1, {}, {})
    if kind == "reversed":
        ledger.mark_reversed("MC-L1-P", user="ana")
    elif kind == "scale":
        ledger.apply_scale("MC-L1-P", value, user="ana")
    else:
        ledger.apply_offset("MC-L1-P", value, user="ana")
    fixed = apply_corrections(raw, ledger.active_corrections((TIMES[0], TIMES[-1])))
    expected = true.copy()
    expected.iloc[5] = np.nan
    np.testing.assert_allclose(fixed["MC-L1-P"], expected, rtol=1e-12)
    pd.testing.assert_series_equal(fixed["MC-L2-P"], healthy, check_names=False)
    assert np.isnan(raw.iloc[5, 0]) and raw.iloc[0, 0] == measure(true).iloc[0], "input kept"


def test_repair_ends_the_correction_at_the_repair_time(ledger):
    true = _true_series()
    raw = pd.DataFrame({"MC-L1-P": np.where(TIMES < REPAIR, -true, true)}, index=TIMES)
    ledger.record_review([finding("MC-L1-P")], *WEEK1, {}, {})
    ledger.mark_reversed("MC-L1-P", user="ana")
    ledger.mark_repaired("MC-L1-P", REPAIR, user="ben")
    fixed = apply_corrections(raw, ledger.active_corrections((TIMES[0], TIMES[-1])))
    np.testing.assert_allclose(fixed["MC-L1-P"], true)


def test_windows_are_half_open_and_corrections_compose_in_order():
    frame = pd.DataFrame({"T": np.full(len(TIMES), 10.0)}, index=TIMES)
    start, end = TIMES[10], TIMES[20]
    scale = Correction("T", gain=2.0, bias=0.0, valid_from=start, valid_until=end)
    shift = Correction("T", gain=1.0, bias=-1.0, valid_from=TIMES[15])
    out = apply_corrections(frame, [scale, shift])["T"]
    assert out.iloc[9] == 10.0 and out.iloc[10] == 20.0, "valid_from is included"
    assert out.iloc[15] == 19.0, "2 × 10, then − 1"
    assert out.iloc[20] == 9.0, "valid_until is excluded"
    assert out.iloc[-1] == 9.0


def test_bad_input_is_refused_clearly():
    frame = pd.DataFrame({"T": [1.0, 2.0]}, index=TIMES[:2])
    other = Correction("GONE", gain=-1.0, bias=0.0)
    with pytest.raises(KeyError, match="not in the snapshots: GONE"):
        apply_corrections(frame, [other])
    assert apply_corrections(frame, [other], missing="ignore").equals(frame)
    with pytest.raises(ValueError, match="tz-aware"):
        apply_corrections(frame.tz_localize(None), [])
    with pytest.raises(ValueError, match="non-zero"):
        Correction("T", gain=0.0, bias=0.0)
    with pytest.raises(ValueError, match="timezone"):
        Correction("T", gain=1.0, bias=0.0, valid_from=pd.Timestamp("2026-03-02"))


def test_integer_columns_are_corrected_as_floats():
    frame = pd.DataFrame({"T": [1, 2, 3]}, index=TIMES[:3])
    out = apply_corrections(frame, [Correction("T", gain=0.5, bias=0.0)])
    assert list(out["T"]) == [0.5, 1.0, 1.5]
