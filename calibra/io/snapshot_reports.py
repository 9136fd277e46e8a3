"""Problems of the snapshot files taken together: overlapping files, points without a column."""

from __future__ import annotations

import pandas as pd

from calibra.io.problems import ProblemLog

SNAPSHOT_DIR = "snapshots"


def report_absent_tags(frames: list[tuple[str, pd.DataFrame]], tags: pd.Index,
                        log: ProblemLog) -> None:
    """Warn, per file, about points of the point list that have no column there (their values
    in that file's rows are missing), and about points in no file at all."""
    everywhere: set[str] = set()
    absent_by_file = []
    for rel, frame in frames:
        cols = set(map(str, frame.columns))
        everywhere |= cols
        absent_by_file.append((rel, [t for t in tags if t not in cols]))
    nowhere = [t for t in tags if t not in everywhere]
    nowhere_set = set(nowhere)
    for rel, absent in absent_by_file:
        absent = [t for t in absent if t not in nowhere_set]
        if absent:
            log.warning(rel, None, None, f"{len(absent)} point(s) of the point list have no column "
                        f"in this file, so their values are missing in its rows: "
                        f"{_some(absent)}", count=len(absent))
    if nowhere:
        log.warning(SNAPSHOT_DIR, None, None, f"{len(nowhere)} point(s) of the point list have no "
                    f"column in any snapshot file (all their values missing): {_some(nowhere)}",
                    count=len(nowhere))


def _some(tags: list[str], n: int = 5) -> str:
    return ", ".join(tags[:n]) + (f" and {len(tags) - n} more" if len(tags) > n else "")


def report_overlaps(frames: list[tuple[str, pd.DataFrame]], log: ProblemLog) -> None:
    for k in range(1, len(frames)):
        rel, frame = frames[k]
        for prev_rel, prev in frames[:k]:
            if frame.index[0] > prev.index[-1]:
                continue
            start, end = frame.index[0], min(frame.index[-1], prev.index[-1])
            shared = int(frame.index.isin(prev.index).sum())
            log.warning(
                rel, None, "timestamp",
                f"overlaps {prev_rel} from {start:%Y-%m-%d %H:%M} to {end:%Y-%m-%d %H:%M} UTC; "
                + (f"{shared} time{' appears' if shared == 1 else 's appear'} in both and keep "
                   f"the values of {prev_rel}" if shared
                   else "no time appears in both, so the rows are merged"),
                count=max(shared, 1),
            )
