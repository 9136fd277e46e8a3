"""Mutations of whole files, rows, columns and encodings of the valid Brackwater site.

Format-only mutations (byte-order mark, CRLF, semicolons with decimal commas, quoting,
padding, gzip, Parquet, split files, rows out of order or repeated) must load to exactly the
content of the valid site; the others must be reported where they are.
"""

from __future__ import annotations

import csv
import gzip
import io
import re
from collections.abc import Callable

import pandas as pd
from hypothesis import strategies as st

from calibra.model.site import Site
from tests.io.site_builder import Table
from tests.robustness.mutations import (
    ANY,
    BRANCHES,
    BUSES,
    POINTS,
    Mutation,
    table,
    with_table,
)
from tests.robustness.small_site import SNAPSHOT_FILE

SMALL_TABLES = [BUSES, BRANCHES, POINTS]
CSV_FILES = [*SMALL_TABLES, SNAPSHOT_FILE]
#: Required columns by the folder format (sample_site/README.md), independent of the loader.
REQUIRED = {
    BUSES: {"bus", "substation", "kv", "zero_injection", "g_shunt_mw", "b_shunt_mvar"},
    BRANCHES: {"branch", "from_bus", "to_bus", "r", "x", "b", "tap", "shift_deg", "kind"},
    POINTS: {"tag", "quantity", "element", "end", "unit", "full_scale", "accuracy_pct",
             "substation", "device"},
}
_DECIMAL = re.compile(r"[-+]?\d+\.\d+(?:[eE][-+]?\d+)?")


def assert_same(got: pd.DataFrame, want: pd.DataFrame) -> None:
    """Frames equal in values, dtypes and labels (a quick test; pandas explains a failure)."""
    if not (got.equals(want) and got.index.name == want.index.name
            and list(got.columns) == list(want.columns)):
        pd.testing.assert_frame_equal(got, want, check_freq=False)


def same_content(reference: Site, *, times: pd.DatetimeIndex | None = None,
                 values_of: list[int] | None = None, sort_tables: bool = False,
                 quiet: bool = False) -> Callable[[Site], None]:
    """The loaded site must equal ``reference``; the snapshots optionally restricted to the
    reference rows ``values_of`` and re-timed to ``times``. ``quiet``: no problems at all."""

    def check(site: Site) -> None:
        for got, want in ((site.network.buses, reference.network.buses),
                          (site.network.branches, reference.network.branches),
                          (site.points, reference.points)):
            if sort_tables:
                got, want = got.sort_index(), want.sort_index()
            assert_same(got, want)
        expected = reference.snapshots
        if values_of is not None:
            expected = expected.iloc[values_of]
        if times is not None:
            expected = expected.set_axis(times, axis=0)
        assert_same(site.snapshots, expected)
        if quiet:
            assert site.problems == [], [str(p) for p in site.problems]

    return check


# ----------------------------------------------------------------------------- formats
@st.composite
def format_only(draw, files: dict[str, bytes], reference: Site) -> Mutation:
    """A change of form that keeps the content."""
    rel = draw(st.sampled_from(CSV_FILES + ["site.toml"]))
    how = draw(st.sampled_from(["bom", "crlf", "cr", "semicolon", "tab", "quote_all",
                                "padding", "blank_lines", "header_case", "permute_columns"]))
    out = dict(files)
    if rel == "site.toml" or how in ("bom", "crlf", "cr"):
        how = how if how in ("crlf", "cr") and rel != "site.toml" else "bom"
        line_end = {"crlf": b"\r\n", "cr": b"\r"}.get(how)
        out[rel] = (files[rel].replace(b"\n", line_end) if line_end
                    else b"\xef\xbb\xbf" + files[rel])
        return Mutation(f"{rel}: {how}", out, must_load=True,
                        expect=same_content(reference, quiet=True))
    t = table(files, rel)
    must_report = []
    if how in ("semicolon", "tab"):
        comma = draw(st.booleans())
        if comma:
            t.rows = [[c.replace(".", ",") if _DECIMAL.fullmatch(c) else c for c in r]
                      for r in t.rows]
        out[rel] = t.text(";" if how == "semicolon" else "\t").encode()
        must_report = [(rel, None, None)]
        how += " with decimal commas" if comma else ""
    elif how == "quote_all":
        buffer = io.StringIO()
        csv.writer(buffer, quoting=csv.QUOTE_ALL, lineterminator="\n").writerows(
            [t.header, *t.rows])
        out[rel] = buffer.getvalue().encode()
    elif how == "padding":
        t.rows = [[f"  {c} " if c else c for c in r] for r in t.rows]
        out[rel] = t.text().encode()
    elif how == "blank_lines":
        lines = files[rel].decode().split("\n")
        at = sorted(draw(st.lists(st.integers(1, len(lines) - 1), min_size=1, max_size=4)),
                    reverse=True)
        for k in at:
            lines.insert(k, draw(st.sampled_from(["", " ", "\t"])) if rel != SNAPSHOT_FILE
                         else "")
        out[rel] = "\n".join(lines).encode()
    elif how == "header_case":
        if rel == SNAPSHOT_FILE:
            t.header = [f" {h}  " for h in t.header]
        else:
            t.header = [draw(st.sampled_from([h.upper(), h.title(), f"  {h} "]))
                        for h in t.header]
        out = with_table(files, rel, t)
    else:
        first = 1 if rel == SNAPSHOT_FILE else 0
        order = list(range(first, len(t.header)))
        order = list(range(first)) + draw(st.permutations(order))
        t.header = [t.header[k] for k in order]
        t.rows = [[r[k] for k in order] for r in t.rows]
        out = with_table(files, rel, t)
    return Mutation(f"{rel}: {how}", out, must_report=must_report, must_load=True,
                    expect=same_content(reference, quiet=not must_report))


@st.composite
def snapshot_container(draw, files: dict[str, bytes], reference: Site) -> Mutation:
    """The snapshot file gzipped, written as Parquet, or split into several files."""
    how = draw(st.sampled_from(["gzip", "parquet_utc", "parquet_local_text", "split"]))
    text = files[SNAPSHOT_FILE]
    out = {k: v for k, v in files.items() if k != SNAPSHOT_FILE}
    if how == "gzip":
        out["snapshots/day.csv.gz"] = gzip.compress(text)
    elif how.startswith("parquet"):
        frame = pd.read_csv(io.BytesIO(text), dtype={"timestamp": str})
        if how == "parquet_utc":
            frame["timestamp"] = reference.snapshots.index
        buffer = io.BytesIO()
        frame.to_parquet(buffer)
        out["snapshots/day.parquet"] = buffer.getvalue()
    else:
        t = Table(text.decode())
        cut = draw(st.integers(1, len(t.rows) - 1))
        overlap = draw(st.integers(0, min(3, cut)))
        first, second = Table(t.text()), Table(t.text())
        first.rows, second.rows = t.rows[:cut], t.rows[cut - overlap:]
        names = draw(st.sampled_from([("a.csv", "b.csv"), ("b.csv", "a.csv")]))
        out[f"snapshots/{names[0]}"] = first.text().encode()
        out[f"snapshots/{names[1]}"] = second.text().encode()
        later = f"snapshots/{names[1]}" if overlap < cut else ANY  # equal starts: either file
        report = [(later, None, "timestamp")] if overlap else []
        return Mutation(f"snapshots split at {cut}, overlap {overlap}", out,
                        must_report=report, must_load=True,
                        expect=same_content(reference, quiet=not overlap))
    return Mutation(f"snapshots as {how}", out, must_load=True,
                    expect=same_content(reference, quiet=True))


# ----------------------------------------------------------------------------- rows
@st.composite
def snapshot_rows(draw, files: dict[str, bytes], reference: Site) -> Mutation:
    """Snapshot rows shuffled, repeated or removed (a jump in time)."""
    t = table(files, SNAPSHOT_FILE)
    n = len(t.rows)
    how = draw(st.sampled_from(["shuffle", "repeat", "remove"]))
    if how == "shuffle":
        order = draw(st.permutations(range(n)))
        t.rows = [t.rows[k] for k in order]
        backwards = any(b < a for a, b in zip(order, order[1:], strict=False))
        report = [(SNAPSHOT_FILE, ANY, "timestamp")] if backwards else []
        return Mutation("snapshot rows shuffled", with_table(files, SNAPSHOT_FILE, t),
                        must_report=report, must_load=True,
                        expect=same_content(reference, quiet=not backwards))
    if how == "repeat":
        source = draw(st.integers(0, n - 1))
        at = draw(st.integers(0, n))
        t.rows.insert(at, list(t.rows[source]))
        return Mutation(f"snapshot row {source + 2} repeated at row {at + 2}",
                        with_table(files, SNAPSHOT_FILE, t),
                        must_report=[(SNAPSHOT_FILE, ANY, "timestamp")], must_load=True,
                        expect=same_content(reference))
    gone = draw(st.sets(st.integers(0, n - 1), min_size=1, max_size=n - 1))
    keep = [k for k in range(n) if k not in gone]
    t.rows = [t.rows[k] for k in keep]
    return Mutation(f"snapshot rows {sorted(gone)} removed", with_table(files, SNAPSHOT_FILE, t),
                    must_load=True, expect=same_content(reference, values_of=keep, quiet=True))


@st.composite
def bad_rows(draw, files: dict[str, bytes]) -> Mutation:
    """A repeated id, or a row with more values than the header names."""
    rel = draw(st.sampled_from(CSV_FILES))
    t = table(files, rel)
    row = draw(st.integers(2, len(t.rows) + 1))
    if rel != SNAPSHOT_FILE and draw(st.booleans()):
        at = draw(st.integers(0, len(t.rows)))
        t.rows.insert(at, list(t.rows[row - 2]))
        later = max(at + 2, row if at + 2 > row else row + 1)
        return Mutation(f"{rel} row {row} repeated at row {at + 2}", with_table(files, rel, t),
                        must_report=[(rel, later, t.header[0])], must_fail=True)
    extra = draw(st.lists(st.sampled_from(["1", "x", " 2 "]), min_size=1, max_size=3))
    t.rows[row - 2] = t.rows[row - 2] + extra
    return Mutation(f"{rel} row {row} has extra values {extra}", with_table(files, rel, t),
                    must_report=[(rel, row, None)], must_fail=True)


# ----------------------------------------------------------------------------- columns
@st.composite
def columns(draw, files: dict[str, bytes]) -> Mutation:
    """A column dropped, added, repeated or left without a name."""
    rel = draw(st.sampled_from(CSV_FILES))
    t = table(files, rel)
    how = draw(st.sampled_from(["drop", "add", "repeat", "unnamed"]))
    column = draw(st.sampled_from(t.header))
    if how == "drop":
        t.drop_column(column)
        out = with_table(files, rel, t)
        if rel == SNAPSHOT_FILE:
            if column == "timestamp":
                return Mutation(f"{rel}: timestamp dropped", out, must_fail=True,
                                must_report=[(rel, 1, t.header[0])])
            points = table(files, POINTS)
            row = 2 + [r[0] for r in points.rows].index(column)
            return Mutation(f"{rel}: column {column} dropped", out, must_load=True,
                            must_report=[(POINTS, row, "tag")])
        required = column in REQUIRED[rel]
        return Mutation(f"{rel}: column {column} dropped", out, must_fail=required,
                        must_load=not required,
                        must_report=[(rel, 1, column)] if required else [])
    if how == "add":
        name = "spare_" + draw(st.text("abcxyz019._", min_size=1, max_size=6))
        t.add_column(name, draw(st.sampled_from(["1", "x", ""])))
        t.rows[0][-1] = "7"
        return Mutation(f"{rel}: column {name} added", with_table(files, rel, t),
                        must_load=True, must_report=[(rel, 1, name)])
    if how == "repeat":
        if rel == SNAPSHOT_FILE and column == "timestamp":
            column = t.header[1]
        t.add_column(column, "1")
        shown = column if rel == SNAPSHOT_FILE else column.lower()
        return Mutation(f"{rel}: column {column} repeated", with_table(files, rel, t),
                        must_fail=True, must_report=[(rel, 1, shown)])
    t.add_column("", "5")
    return Mutation(f"{rel}: a column without a name", with_table(files, rel, t),
                    must_fail=rel != SNAPSHOT_FILE, must_report=[(rel, 1, None)])
