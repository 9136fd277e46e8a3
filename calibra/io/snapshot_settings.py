"""The ``[snapshots]`` table of ``site.toml``: how long historian exports are put on a grid.

```toml
[snapshots]
interval = "1min"          # the snapshot grid; inferred from the data when left out
max_age = "1min"           # a sample serves grid times younger than this (default: interval)
numeric_quality = "auto"   # plain numbers: "auto" (0-255 OPC DA, above OPC UA), "opc-ua"

[snapshots.quality]        # the site's own quality codes -> good, questionable, bad,
"M" = "manual"             #   substituted, manual or override
"17" = "bad"
```
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import pandas as pd

from calibra.io.problems import ProblemLog
from calibra.io.quality import NUMERIC_RULES, Quality, parse_custom

TABLE = "snapshots"
_KEYS = ("interval", "max_age", "numeric_quality", "quality")


@dataclass(frozen=True)
class SnapshotSettings:
    """``[snapshots]``: the grid interval and maximum age (None: inferred / one interval),
    how plain numeric quality codes are read, and the site's own codes."""

    interval: pd.Timedelta | None = None
    max_age: pd.Timedelta | None = None
    numeric_quality: str = "auto"
    quality: dict[str, Quality] = field(default_factory=dict)


def positive_duration(value: object) -> pd.Timedelta | None:
    """A duration text such as ``"30s"``, ``"1min"`` or ``"15min"`` greater than zero; None
    when ``value`` is none."""
    if not isinstance(value, str) or not value.strip():
        return None
    try:
        t = pd.Timedelta(value.strip())
    except (ValueError, TypeError):
        return None
    return t if t > pd.Timedelta(0) else None


def read_snapshot_settings(table: object, file: str, line_of: Callable[[str], int | None],
                           log: ProblemLog) -> SnapshotSettings:
    """``[snapshots]`` checked (problems logged as errors with their line)."""
    if not isinstance(table, dict):
        log.error(file, line_of(TABLE), TABLE, "must be a table: [snapshots]")
        return SnapshotSettings()
    for key in table:
        if key not in _KEYS:
            log.warning(file, line_of(key), key, "unknown key in [snapshots]; ignored")
    times = {}
    for key in ("interval", "max_age"):
        if key in table:
            times[key] = positive_duration(table[key])
            if times[key] is None:
                log.error(file, line_of(key), key, f"must be a duration such as \"1min\", "
                          f"\"30s\" or \"15min\", not {table[key]!r}")
    numeric = table.get("numeric_quality", "auto")
    if numeric not in NUMERIC_RULES:
        log.error(file, line_of("numeric_quality"), "numeric_quality",
                  f"must be one of {', '.join(NUMERIC_RULES)}, not {numeric!r}")
        numeric = "auto"
    custom: dict[str, Quality] = {}
    if "quality" in table:
        codes = table["quality"]
        if not isinstance(codes, dict):
            log.error(file, line_of("quality"), "quality",
                      "must be a table [snapshots.quality] of code = class")
        else:
            custom, problems = parse_custom(codes)
            for problem in problems:
                log.error(file, line_of("quality"), "quality", problem)
    return SnapshotSettings(times.get("interval"), times.get("max_age"), numeric, custom)
