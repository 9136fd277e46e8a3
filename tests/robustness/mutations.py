"""Mutations of the valid Brackwater site for the property-based loader tests: the types, and
mutations of single cells.

A :class:`Mutation` carries the mutated files and what the loader must do with them:

- ``must_report``: places where a problem (error or warning) must be reported;
- ``unless``: a place and a test of the loaded site — when the site loads and the test fails
  (the loaded value is not what the cell says), a problem must name that place; when the site
  does not load, an error must name its file and row (or any file, for ids and references,
  whose breakage shows where they are used);
- ``must_fail`` / ``must_load`` and ``expect`` (assertions on the loaded site).

What a cell "says" is read here independently of the loader, from the folder format in
``sample_site/README.md``: numbers by Python's ``float``, true/false words, choices by name.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

import pandas as pd
from hypothesis import strategies as st

from calibra.model.site import Site
from tests.io.site_builder import Table
from tests.robustness.small_site import SNAPSHOT_FILE, TIMEZONE

ANY = "<any>"
Place = tuple[str, int | None | str, str | None]  # file, row, column; ANY matches anything

BUSES, BRANCHES, POINTS = "network/buses.csv", "network/branches.csv", "points.csv"

#: The kind of every column of the valid site's tables (the folder format's rules).
COLUMN_KINDS: dict[str, dict[str, str]] = {
    BUSES: {"bus": "id", "substation": "text", "kv": "positive", "zero_injection": "bool",
            "g_shunt_mw": "number0", "b_shunt_mvar": "number0", "name": "name"},
    BRANCHES: {"branch": "id", "from_bus": "ref", "to_bus": "ref", "r": "number",
               "x": "number", "b": "number0", "tap": "tap", "shift_deg": "number0",
               "kind": "choice", "in_service": "bool_true", "name": "name"},
    POINTS: {"tag": "id", "quantity": "choice", "element": "ref", "end": "choice",
             "unit": "choice", "full_scale": "positive?", "accuracy_pct": "positive?",
             "substation": "text", "device": "text", "rtu": "text?", "channel": "text?",
             "ct_ratio": "text?", "vt_ratio": "text?", "sigma": "positive?", "note": "text?"},
}
#: Columns whose rule differs on a branch_status row: device may be empty, and full scale and
#: accuracy class empty or 0, both meaning "not applicable" (NaN) — the folder format's rule.
STATUS_ROW_KINDS = {"device": "text?", "full_scale": "status_scale",
                    "accuracy_pct": "status_scale"}
TRUE_WORDS, FALSE_WORDS = {"true", "yes", "1"}, {"false", "no", "0"}
#: What an empty cell of an optional number column means.
EMPTY_MEANS = {"number0": 0.0, "tap": 1.0, "positive?": math.nan}

NASTY_CELLS = [
    "", " ", "abc", "nan", "NaN", "-nan", "inf", "-inf", "Infinity", "1e999", "-1e999", "0",
    "-0", "1", "-1", "1.5", "1,5", "1.2.3", "0x1A", "1_000", "１２", "+3", " 42 ", "true",
    "FALSE", "yes", "null", "None", "N/A", "#VALUE!", "=1+1", "@SUM(A1)", "é", "ÿ", "\u00a0",
    "\ufeff", "'", '"', "\\", "--", "1e-320", "9" * 400, "2026-04-14 06:00:00", "450:5",
    "0:5", "5:0", "1200/5", "from", "to", "FROM", "line", "Transformer", "p_flow", "MW", "mw",
    "kV", "status", "a\nb", "x;y", "1;2", "\t7", "\x00", "WRF_132", "CSH-T1",
]
cell_values = st.one_of(
    st.sampled_from(NASTY_CELLS),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.integers(-(10**20), 10**20).map(str),
    st.text(max_size=10),
)


@dataclass
class Mutation:
    """Mutated files and what the loader must make of them (see the module docstring)."""

    label: str
    files: dict[str, bytes]
    must_report: list[Place] = field(default_factory=list)
    unless: tuple[Place, Callable[[Site], bool]] | None = None
    failure_anywhere: bool = False
    must_fail: bool = False
    must_load: bool = False
    expect: Callable[[Site], None] | None = None

    def __repr__(self) -> str:  # the files are long; the label says what was done
        return f"Mutation({self.label!r})"


def table(files: dict[str, bytes], rel: str) -> Table:
    return Table(files[rel].decode("utf-8"))


def with_table(files: dict[str, bytes], rel: str, t: Table, sep: str = ",") -> dict[str, bytes]:
    out = dict(files)
    out[rel] = t.text(sep).encode("utf-8")
    return out


# ----------------------------------------------------------------------------- what a cell says
def reference_float(text: str) -> float | None:
    """The number a cell holds by Python's own reading; None when it holds none."""
    try:
        value = float(text.strip())
    except ValueError:
        return None
    return value if math.isfinite(value) else None


def _same(a, b) -> bool:
    if isinstance(a, float) or isinstance(b, float):
        try:
            a, b = float(a), float(b)
        except (TypeError, ValueError):
            return False
        return (math.isnan(a) and math.isnan(b)) or math.isclose(a, b, rel_tol=1e-12)
    return a == b


def faithful(kind: str, raw: str, loaded, row_id: str) -> bool:
    """Whether ``loaded`` is what a cell of ``kind`` holding ``raw`` says."""
    text = raw.strip()
    if kind in ("number", "number0", "positive", "positive?", "tap"):
        if text == "":
            return kind in EMPTY_MEANS and _same(loaded, EMPTY_MEANS[kind])
        value = reference_float(text)
        if value is None or (kind in ("positive", "positive?", "tap") and value <= 0):
            return False
        return _same(loaded, value)
    if kind == "status_scale":
        value = math.nan if text == "" else reference_float(text)
        if value is None or value < 0:
            return False
        return _same(loaded, math.nan if value == 0 else value)
    if kind in ("text", "text?", "ref"):
        return (text != "" or kind == "text?") and loaded == text
    if kind == "name":
        return loaded == (text or row_id)
    if kind in ("bool", "bool_true"):
        low = text.lower()
        if low == "":
            return kind == "bool_true" and bool(loaded)
        return (low in TRUE_WORDS and bool(loaded)) or (low in FALSE_WORDS and not bool(loaded))
    if kind == "choice":
        return isinstance(loaded, str) and loaded.lower() == text.lower()
    raise ValueError(kind)


def _frame(site: Site, rel: str) -> pd.DataFrame:
    return {BUSES: site.network.buses, BRANCHES: site.network.branches,
            POINTS: site.points}[rel]


# ----------------------------------------------------------------------------- small tables
@st.composite
def small_table_cell(draw, files: dict[str, bytes]) -> Mutation:
    """One cell of buses.csv, branches.csv or points.csv set to a drawn value."""
    rel = draw(st.sampled_from([BUSES, BRANCHES, POINTS]))
    t = table(files, rel)
    row = draw(st.integers(2, len(t.rows) + 1))
    column = draw(st.sampled_from(t.header))
    raw = draw(cell_values)
    old = t.get(row, column)
    kind = COLUMN_KINDS[rel][column]
    id_column = t.header[0]
    t.set(row, column, raw)
    if rel == POINTS and t.get(row, "quantity").strip().lower() == "branch_status":
        kind = STATUS_ROW_KINDS.get(column, kind)
    row_id = raw.strip() if column == id_column else t.get(row, id_column)

    def loaded_as_written(site: Site) -> bool:
        frame = _frame(site, rel)
        if kind == "id":
            return row_id in frame.index
        try:
            loaded = frame.at[row_id, column]
        except KeyError:
            return False
        if kind == "choice" and column == "end" and raw.strip() == "":
            return loaded == ""
        return faithful(kind, raw, loaded, row_id)

    return Mutation(
        f"{rel} row {row} column {column}: {old!r} -> {raw!r}",
        with_table(files, rel, t),
        unless=((rel, row, column), loaded_as_written),
        failure_anywhere=kind in ("id", "ref") or column in ("quantity", "substation"),
    )


# ----------------------------------------------------------------------------- snapshot cells
def status_tags(files: dict[str, bytes]) -> set[str]:
    t = table(files, POINTS)
    return {r[0] for r in t.rows if r[t.header.index("quantity")] == "branch_status"}


def instant(text: str) -> pd.Timestamp | None:
    """The UTC instant a time cell names by pandas' own reading (naive: site time), None when
    it names none unambiguously."""
    try:
        ts = pd.Timestamp(text.strip())
    except (ValueError, OverflowError, TypeError):
        return None
    if ts is pd.NaT or not isinstance(ts, pd.Timestamp):
        return None
    try:
        if ts.tzinfo is None:
            ts = ts.tz_localize(TIMEZONE, ambiguous="raise", nonexistent="raise")
        return ts.tz_convert("UTC")
    except Exception:  # noqa: BLE001 - pandas raises several kinds (NotImplementedError
        return None  # beyond year 9999, ValueError for skipped or repeated local times)


@st.composite
def snapshot_cell(draw, files: dict[str, bytes], base: Site) -> Mutation:
    """One cell of the snapshot file (a value or a time) set to a drawn value."""
    t = table(files, SNAPSHOT_FILE)
    row = draw(st.integers(2, len(t.rows) + 1))
    time_cell = draw(st.integers(0, 2)) == 0  # a third of the draws: the timestamp column
    column = "timestamp" if time_cell else draw(st.sampled_from(t.header[1:]))
    raw = draw(st.one_of(cell_values, st.sampled_from(TIME_TEXTS)))
    old = t.get(row, column)
    t.set(row, column, raw)
    when = base.snapshots.index[row - 2]
    status = status_tags(files)

    def loaded_as_written(site: Site) -> bool:
        snaps = site.snapshots
        if column == "timestamp":
            moment = instant(raw)
            if moment is None or moment not in snaps.index:
                return False
            got = snaps.loc[moment].to_numpy(float)
            want = base.snapshots.iloc[row - 2].to_numpy(float)
            return all(_same(a, b) for a, b in zip(got, want, strict=True))
        if when not in snaps.index:
            return False
        loaded = snaps.at[when, column]
        value = reference_float(raw)
        if raw.strip() == "":
            return math.isnan(loaded)
        if value is None or (column in status and value not in (0.0, 1.0)):
            return False
        return _same(loaded, value)

    return Mutation(f"{SNAPSHOT_FILE} row {row} column {column}: {old!r} -> {raw!r}",
                    with_table(files, SNAPSHOT_FILE, t),
                    unless=((SNAPSHOT_FILE, row, column), loaded_as_written), must_load=True)


TIME_TEXTS = [
    "2026-04-14 06:00:00", "2026-04-14T06:07:00", "2026-04-14 06:07", "2026-04-14T09:07:00Z",
    "2026-04-14T06:07:00-03:00", "2026-04-14T06:07:00+0100", "2026-04-14 6:07",
    "14.04.2026 06:07", "04/14/2026 06:07", "2026-04-14", "2026-13-01 00:00", "2026-02-30 00:00",
    "2026-03-08 02:30", "2026-11-01 01:30", "1677-09-21 00:00", "2262-04-12 00:00",
    "0000-01-01 00:00", "9999-12-31 23:59", "2026-04-14 24:00", "2026-04-14T06:07:00.123456789",
    "2026-04-14 06:07:00 ADT", "now", "today", "1776000000", "", "2026-04-14T06:07:00+25:00",
]
