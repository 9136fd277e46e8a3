"""What the findings list shows, free of Qt: findings of the latest review merged with the
ledger's states, filters, grouping order, and moving from one flagged point to the next.

The window binds its widgets to a :class:`FindingsView`; tests drive it without a display.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from calibra.ledger.states import AWAITING_ACTION_STATES

#: Columns the list needs (a subset of findings.csv plus ``state`` and ``in_review``).
LIST_COLUMNS = ["finding_id", "tag", "device", "substation", "finding", "confidence", "state",
                "factor", "offset", "drift_per_day", "evidence", "in_review", "reopened",
                # a network-model finding's own columns (its details show them)
                "element", "unit", "action", "parameter", "model_value", "estimated_value",
                "estimated_std", "explains", "alternative_meters"]
#: A point-list note that marks a point as being commissioned (case-insensitive).
COMMISSIONING_NOTE = re.compile(r"commission", re.IGNORECASE)


@dataclass
class FindingFilter:
    """What the engineer asked to see. Empty values mean "all"."""

    substations: frozenset[str] = field(default_factory=frozenset)
    kind: str = ""
    state: str = ""
    min_confidence: float = 0.0
    search: str = ""
    include_earlier: bool = False  #: ledger findings this review did not find again

    def accepts(self, table: pd.DataFrame) -> pd.Series:
        """Boolean mask over the rows of a findings table."""
        keep = pd.Series(True, index=table.index)
        if self.substations:
            keep &= table["substation"].isin(self.substations)
        if self.kind:
            keep &= table["finding"] == self.kind
        if self.state:
            keep &= table["state"] == self.state
        if self.min_confidence > 0:
            keep &= table["confidence"].fillna(0.0) >= self.min_confidence
        if self.search.strip():
            keep &= table["tag"].str.contains(self.search.strip(), case=False, regex=False)
        if not self.include_earlier:
            keep &= table["in_review"]
        return keep


LATE_START = pd.Timedelta(hours=6)  #: a substation reporting this much later than the rest is new


def commissioning_substations(points: pd.DataFrame, snapshots: pd.DataFrame | None = None,
                              late_after: pd.Timedelta = LATE_START) -> list[str]:
    """Substations under commissioning: those with a point whose note says so; when no note
    does, the substation whose points started reporting last, if that was more than
    ``late_after`` after the others (the newest one)."""
    notes = points.get("note")
    if notes is not None:
        marked = points.loc[notes.fillna("").astype(str).str.contains(COMMISSIONING_NOTE),
                            "substation"]
        if len(marked):
            return sorted(set(marked.astype(str)))
    if snapshots is None or snapshots.empty:
        return []
    cols = [t for t in points.index if t in snapshots.columns]
    have = snapshots[cols].notna()
    seen = have.any(axis=0)
    if not seen.any():
        return []
    first = have.loc[:, seen].idxmax(axis=0)
    by_sub = first.groupby(points.loc[first.index, "substation"].astype(str)).min()
    if len(by_sub) < 2:
        return []
    ordered = by_sub.sort_values()
    if ordered.iloc[-1] - ordered.iloc[-2] > late_after:
        return [str(ordered.index[-1])]
    return []


class FindingsView:
    """Findings of the latest review (or, before one, of the ledger) with ledger states."""

    def __init__(self, focus: list[str] | None = None):
        self.focus = list(focus or [])  #: substations to offer as the "new substation" focus
        self._review: pd.DataFrame | None = None
        self._ledger = pd.DataFrame(columns=LIST_COLUMNS)
        self._table: pd.DataFrame | None = None
        self.filter = FindingFilter()

    # ---- data ---------------------------------------------------------------------------
    def set_review(self, findings: pd.DataFrame | None) -> None:
        """The findings table of the latest review (``ReviewRun.findings``)."""
        self._review = None if findings is None else findings.copy()
        self._table = None

    def set_ledger(self, ledger_findings: pd.DataFrame) -> None:
        """The ledger's findings (``Ledger.findings()``, indexed by finding id)."""
        frame = ledger_findings.reset_index()
        if "finding_id" not in frame.columns:
            frame = frame.rename(columns={"index": "finding_id"})
        self._ledger = frame
        self._table = None

    @property
    def has_review(self) -> bool:
        return self._review is not None

    def table(self) -> pd.DataFrame:
        """Every finding the list can show: this review's (``in_review`` True) with the ledger
        state, then ledger findings it did not find again (``in_review`` False)."""
        if self._table is None:
            self._table = self._merged()
        return self._table

    def _merged(self) -> pd.DataFrame:
        states = dict(zip(self._ledger.get("finding_id", []), self._ledger.get("state", []),
                          strict=True))
        if self._review is None:
            review = pd.DataFrame(columns=LIST_COLUMNS)
        else:
            review = self._review.copy()
            review["state"] = review["finding_id"].map(states).fillna(review["state"])
            review["in_review"] = True
        earlier = self._ledger[~self._ledger["finding_id"].isin(review["finding_id"])].copy()
        earlier["in_review"] = self._review is None
        frames = [f for f in (review, earlier) if len(f)]
        if not frames:
            return pd.DataFrame(columns=LIST_COLUMNS)
        # Column by column, so a column that is empty in one frame takes the other's type.
        parts = [f.reindex(columns=LIST_COLUMNS) for f in frames]
        out = pd.DataFrame({c: pd.concat([f[c].astype(object) for f in parts],
                                         ignore_index=True).infer_objects()
                            for c in LIST_COLUMNS})
        out["confidence"] = pd.to_numeric(out["confidence"], errors="coerce").astype(float)
        for name in ("factor", "offset", "drift_per_day"):
            out[name] = pd.to_numeric(out[name], errors="coerce").astype(float)
        for name in ("tag", "device", "substation", "finding", "state", "evidence", "reopened"):
            out[name] = out[name].fillna("").astype(str)
        out["in_review"] = out["in_review"].astype(bool)
        return out

    def visible(self) -> pd.DataFrame:
        """The filtered findings in list order: focus substations first, then by substation,
        device and tag."""
        table = self.table()
        if table.empty:
            return table
        shown = table[self.filter.accepts(table)].copy()
        shown["_focus"] = ~shown["substation"].isin(self.focus)
        shown = shown.sort_values(["_focus", "substation", "device", "tag", "finding"],
                                  kind="stable")
        return shown.drop(columns="_focus").reset_index(drop=True)

    def groups(self) -> list[tuple[str, list[tuple[str, pd.DataFrame]]]]:
        """The visible findings grouped: [(substation, [(device, rows), ...]), ...]; a finding
        without a device (an RTU's clock, a tap changer, a network-model parameter) is grouped
        under its element."""
        shown = self.visible()
        if shown.empty:
            return []
        element = shown["element"].fillna("").astype(str) if "element" in shown else ""
        group = shown["device"].where(shown["device"] != "", element)
        out = []
        for sub in dict.fromkeys(shown["substation"]):
            here = shown["substation"] == sub
            out.append((sub, [(dev, shown[here & (group == dev)])
                              for dev in dict.fromkeys(group[here])]))
        return out

    # ---- choices for the filter widgets -------------------------------------------------
    def choices(self, column: str) -> list[str]:
        """Distinct values of a column over every finding (for the filter drop-downs)."""
        table = self.table()
        if table.empty:
            return []
        return sorted(v for v in table[column].unique() if v)

    # ---- navigation ---------------------------------------------------------------------
    def neighbour(self, current: str | None, step: int) -> str | None:
        """The finding id ``step`` places after ``current`` in list order."""
        return neighbour(list(self.visible()["finding_id"]), current, step)

    def row(self, finding_id: str) -> pd.Series | None:
        """One finding by id, or None."""
        table = self.table()
        hit = table[table["finding_id"] == finding_id]
        return None if hit.empty else hit.iloc[0]

    def flagged_tags(self) -> set[str]:
        """Tags with an open finding (for highlighting on the network diagram)."""
        table = self.table()
        if table.empty:
            return set()
        open_ = table["state"].isin(AWAITING_ACTION_STATES) & table["in_review"]
        return set(table.loc[open_, "tag"])


def neighbour(ids: list[str], current: str | None, step: int) -> str | None:
    """The id ``step`` places after ``current`` in ``ids`` (wrapping round); the first (or
    last) one when ``current`` is not among them."""
    if not ids:
        return None
    if current not in ids:
        return ids[0] if step > 0 else ids[-1]
    return ids[(ids.index(current) + step) % len(ids)]


def confidence_text(value: float) -> str:
    """A confidence as the list shows it."""
    return "" if value is None or not np.isfinite(value) else f"{value:.2f}"
