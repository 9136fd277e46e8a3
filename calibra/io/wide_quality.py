"""Quality columns of wide snapshot tables: ``TAG:quality`` beside the column ``TAG``.

Each cell holds a code of :mod:`calibra.io.quality` for the value in the same row: a bad (or
unknown) code makes the value missing, questionable values are used and counted, substituted,
manual and override values are used and reported per tag with their period. A quality column
whose tag has no column is reported and ignored.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from calibra.io.problems import ProblemLog
from calibra.io.quality import Source, Validity, classify_column
from calibra.io.snapshot_settings import SnapshotSettings
from calibra.model.times import for_people

QUALITY_SUFFIX = ":quality"
SOURCE_WORDS = {Source.SUBSTITUTED: "substituted", Source.MANUAL: "manual",
                Source.OVERRIDE: "override"}


@dataclass(frozen=True)
class Marks:
    """What reading quality columns needs besides the table."""

    settings: SnapshotSettings
    timezone: str


def is_quality_column(name: str) -> bool:
    """True for a column named ``TAG:quality``."""
    return name.lower().endswith(QUALITY_SUFFIX) and len(name) > len(QUALITY_SUFFIX)


def source_message(word: str, times: np.ndarray, timezone: str) -> str:
    """'manual value from Tue 2027-03-02 10:15 CET to … (12 sample(s))' for people."""
    since, until = (for_people(pd.Timestamp(int(t), tz="UTC"), timezone, weekday=True)
                    for t in (times.min(), times.max()))
    when = f"at {since}" if since == until else f"from {since} to {until}"
    return f"{word} value {when} ({len(times)} sample(s); used as given)"


def apply_quality(table: pd.DataFrame, names: list[str], keep: list[int], values: np.ndarray,
                  rows: np.ndarray, valid: np.ndarray, times: pd.DatetimeIndex, rel: str,
                  log: ProblemLog, marks: Marks | None) -> None:
    """Set values whose quality column says bad to missing (in place), with the reports."""
    settings = marks.settings if marks is not None else SnapshotSettings()
    timezone = marks.timezone if marks is not None else "UTC"
    tags = {names[pos]: j for j, pos in enumerate(keep)}
    for pos, name in enumerate(names):
        if not is_quality_column(name):
            continue
        tag = name[: -len(QUALITY_SUFFIX)]
        if tag not in tags:
            log.warning(rel, 1, name, f"a quality column without a column '{tag}' of a point "
                        "of the point list; ignored")
            continue
        j = tags[tag]
        codes = table.iloc[:, pos]
        validity, source, unknown = classify_column(codes, settings.quality,
                                                    settings.numeric_quality)
        present = valid & ~np.isnan(values[:, j])
        bad = present & (validity == Validity.BAD)
        for mask, what in ((bad & ~unknown, "marked bad (read as missing)"),
                           (present & unknown, "with a quality code that is not known, such as "
                            "'{}' (read as missing; map the site's codes in [snapshots.quality] "
                            "of site.toml)"),
                           (present & (validity == Validity.QUESTIONABLE),
                            "marked questionable (used)")):
            if mask.any():
                first = int(np.flatnonzero(mask)[0])
                log.warning(rel, int(rows[first]), name, f"{int(mask.sum())} value(s) of '{tag}' "
                            + what.format(codes.iloc[first]) + ", the first in this row",
                            count=int(mask.sum()))
        for code, word in SOURCE_WORDS.items():
            mask = present & ~bad & (source == code)
            if mask.any():
                first = int(np.flatnonzero(mask)[0])
                log.warning(rel, int(rows[first]), tag,
                            source_message(word, times.asi8[mask], timezone)
                            + ", the first in this row", count=int(mask.sum()))
        values[bad, j] = np.nan
