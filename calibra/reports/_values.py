"""Reading cells of findings and point-list rows that may be empty, NaN or missing."""

from __future__ import annotations

import math
from collections.abc import Mapping

import pandas as pd


def text(row: Mapping, key: str) -> str:
    """The cell as stripped text; "" when missing, None or NaN."""
    value = row.get(key) if hasattr(row, "get") else None
    if value is None:
        return ""
    if not isinstance(value, str):
        try:
            if pd.isna(value):
                return ""
        except (TypeError, ValueError):
            pass
    return str(value).strip()


def number(row: Mapping, key: str) -> float | None:
    """The cell as a finite float, or None."""
    value = row.get(key) if hasattr(row, "get") else None
    if value is None or isinstance(value, str) and not value.strip():
        return None
    try:
        value = float(value)
    except (TypeError, ValueError):
        return None
    return value if math.isfinite(value) else None


def timestamp(row: Mapping, key: str) -> pd.Timestamp | None:
    """The cell as a timestamp (text from findings.csv or a Timestamp), or None."""
    value = text(row, key)
    if not value:
        return None
    try:
        return pd.Timestamp(row.get(key))
    except (TypeError, ValueError):
        return None


def fmt(value: float, digits: int = 4) -> str:
    """A short readable number: 4 significant digits, no exponent for everyday sizes."""
    return f"{value:.{digits}g}"
