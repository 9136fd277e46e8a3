"""Snapshot files in Parquet with hostile column types: the loader reads them or reports the
place, and never fails with anything but a located problem."""

from __future__ import annotations

import io

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
from hypothesis import strategies as st

from calibra.model.site import Site
from tests.robustness.mutations import ANY, Mutation
from tests.robustness.small_site import SNAPSHOT_FILE

PARQUET = "snapshots/day.parquet"


def _column(kind: str, values: np.ndarray, draw) -> pa.Array:
    """``values`` (float) as an Arrow array of another type."""
    n = len(values)
    if kind == "float32":
        return pa.array(values.astype(np.float32))
    if kind == "int64_nulls":
        ints = [None if k % 5 == 0 else int(round(v)) for k, v in enumerate(values)]
        return pa.array(ints, pa.int64())
    if kind == "bool":
        return pa.array([bool(k % 2) for k in range(n)])
    if kind == "mixed_text":
        words = draw(st.lists(st.sampled_from(["", " 3 "] + BAD_WORDS), min_size=n, max_size=n))
        return pa.array([w if k % 3 == 0 else f"{v}" for k, (w, v) in
                         enumerate(zip(words, values, strict=True))])
    if kind == "dictionary":
        return pa.array([f"{v:.1f}" for v in values]).dictionary_encode()
    if kind == "decimal":
        import decimal

        return pa.array([decimal.Decimal(f"{v:.3f}") for v in values], pa.decimal128(12, 3))
    if kind == "list":
        return pa.array([[float(v)] for v in values])
    if kind == "binary":
        return pa.array([f"{v}".encode() for v in values], pa.binary())
    if kind == "timestamp":
        return pa.array(pd.date_range("2026-01-01", periods=n, freq="h"))
    if kind == "all_null":
        return pa.nulls(n, pa.float64())
    raise ValueError(kind)


BAD_WORDS = ["x", "1,5", "nan", "inf", "-"]  # not finite numbers by Python's float
TIME_KINDS = ["utc", "local_naive", "other_zone", "epoch_int", "text", "text_garbage",
              "date_only", "none"]
VALUE_KINDS = ["float32", "int64_nulls", "bool", "mixed_text", "dictionary", "decimal", "list",
               "binary", "timestamp", "all_null"]


def _times(kind: str, utc: pd.DatetimeIndex, tz: str) -> pa.Array:
    if kind == "utc":
        return pa.array(utc.as_unit("ms"))
    if kind == "local_naive":
        return pa.array(utc.tz_convert(tz).tz_localize(None).as_unit("us"))
    if kind == "other_zone":
        return pa.array(utc.tz_convert("Asia/Kolkata"))
    if kind == "epoch_int":
        return pa.array(utc.asi8)
    if kind == "date_only":
        return pa.array(utc.date)
    if kind == "none":
        return pa.nulls(len(utc), pa.timestamp("ns"))
    text = list(utc.tz_convert(tz).strftime("%Y-%m-%d %H:%M:%S"))
    if kind == "text_garbage":
        text[1], text[-1] = "yesterday", ""
    return pa.array(text)


@st.composite
def hostile_parquet(draw, files: dict[str, bytes], reference: Site) -> Mutation:
    """The snapshot file as Parquet with a drawn timestamp type and some value columns of
    drawn types (repeated names too: Arrow allows them)."""
    snaps = reference.snapshots
    time_kind = draw(st.sampled_from(TIME_KINDS))
    arrays = [_times(time_kind, snaps.index, reference.timezone)]
    names = ["timestamp"]
    changed = draw(st.dictionaries(st.sampled_from(list(snaps.columns)),
                                   st.sampled_from(VALUE_KINDS), max_size=4))
    for tag in snaps.columns:
        values = snaps[tag].to_numpy(float)
        arrays.append(_column(changed[tag], values, draw) if tag in changed
                      else pa.array(values))
        names.append(tag)
    repeat = draw(st.integers(0, 9)) == 0
    if repeat:
        arrays.append(arrays[1])
        names.append(names[1])
    cut = draw(st.integers(0, 4)) == 0
    if cut:
        rows = draw(st.integers(0, 2))
        arrays = [a.slice(0, rows) for a in arrays]
    buffer = io.BytesIO()
    pq.write_table(pa.Table.from_arrays(arrays, names=names), buffer)
    out = {k: v for k, v in files.items() if k != SNAPSHOT_FILE}
    out[PARQUET] = buffer.getvalue()
    report = []
    if not cut and not repeat:
        if time_kind in ("epoch_int", "text_garbage"):
            report.append((PARQUET, ANY, "timestamp"))
        timed = time_kind in ("utc", "local_naive", "other_zone", "text")
        for tag, kind in changed.items():
            bad = kind == "mixed_text" and any(
                str(v) in BAD_WORDS for v in pa.Table.from_arrays(arrays, names=names)
                .column(tag).to_pylist())
            if timed and (bad or kind in ("list", "timestamp")):
                report.append((PARQUET, ANY, tag))
    label = f"parquet: times {time_kind}, columns {changed}" + (", a name twice" if repeat else "")
    return Mutation(label, out, must_report=report)
