"""JSON text for the ledger's settings, summaries and action payloads."""

from __future__ import annotations

import json
import math
from datetime import date, datetime
from pathlib import PurePath

import numpy as np
import pandas as pd


def _plain(value):
    if isinstance(value, pd.Timestamp | datetime | date):
        return value.isoformat()
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.floating):
        return float(value)
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, np.ndarray):
        return _finite(value.tolist())
    if isinstance(value, PurePath | pd.Timedelta):
        return str(value)
    if isinstance(value, set | frozenset | tuple):
        return list(value)
    raise TypeError(f"cannot store a {type(value).__name__} in the ledger: {value!r}")


def dumps(obj) -> str:
    """Compact, key-sorted JSON; timestamps, numpy scalars and paths become plain values.

    NaN and infinities are written as null (JSON has no such numbers).
    """
    return json.dumps(_finite(obj), default=_plain, sort_keys=True, ensure_ascii=False,
                      allow_nan=False)


def _finite(obj):
    if isinstance(obj, float | np.floating) and not math.isfinite(obj):
        return None
    if isinstance(obj, dict):
        return {str(k): _finite(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_finite(v) for v in obj]
    return obj


def loads(text: str | None):
    return {} if text is None else json.loads(text)
