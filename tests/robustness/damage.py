"""Damaged files (empty, missing, truncated, random bytes), other encodings, a broken
``site.toml``, and stacks of mutations for the command-line properties."""

from __future__ import annotations

import csv
import zoneinfo

from hypothesis import strategies as st
from hypothesis.errors import InvalidArgument

from calibra.model.site import Site
from tests.robustness.file_mutations import (
    CSV_FILES,
    bad_rows,
    columns,
    format_only,
    snapshot_container,
    snapshot_rows,
)
from tests.robustness.mutations import (
    ANY,
    BRANCHES,
    BUSES,
    POINTS,
    Mutation,
    small_table_cell,
    snapshot_cell,
    table,
)
from tests.robustness.parquet_mutations import hostile_parquet
from tests.robustness.small_site import SNAPSHOT_FILE
from tests.robustness.time_mutations import daylight_saving, offsets

ALL_FILES = ["site.toml", *CSV_FILES]
NAMES = ["Ébène Süd", "Ölmühle", "Åsgård", "Façade nº 5", "Cañón", "Ærø"]


@st.composite
def damaged_file(draw, files: dict[str, bytes]) -> Mutation:
    """A file emptied, deleted, cut short, reduced to its header, or replaced by bytes."""
    rel = draw(st.sampled_from(ALL_FILES))
    how = draw(st.sampled_from(["empty", "blank", "delete", "truncate", "bytes", "header",
                                "blank_first_row", "huge_cell"]))
    out = dict(files)
    snapshot = rel == SNAPSHOT_FILE
    where = ("snapshots", None, None) if snapshot else (rel, None, None)
    if how in ("empty", "blank"):
        out[rel] = b"" if how == "empty" else draw(st.sampled_from([b" ", b"\n\n", b" \r\n\t"]))
        return Mutation(f"{rel}: {how}", out, must_fail=True, must_report=[(rel, None, None)])
    if how == "delete":
        del out[rel]
        return Mutation(f"{rel}: deleted", out, must_fail=True, must_report=[where])
    if how == "header" and rel != "site.toml":
        out[rel] = files[rel].split(b"\n", 1)[0] + b"\n"
        report = [(rel, None, None)] + ([where] if snapshot else [])
        return Mutation(f"{rel}: header only", out, must_fail=True, must_report=report)
    if how == "blank_first_row" and rel != "site.toml":
        out[rel] = draw(st.sampled_from([b"\n", b"\r\n", b"  \n", b"\t\n"])) + files[rel]
        return Mutation(f"{rel}: empty first row", out, must_fail=True,
                        must_report=[(rel, 1, None)])
    if how == "huge_cell" and rel != "site.toml":
        lines = files[rel].split(b"\n")
        row = draw(st.integers(2, len(lines) - 1))
        lines[row - 1] = lines[row - 1] + b"x" * 140_000  # past the csv module's field limit
        out[rel] = b"\n".join(lines)
        return Mutation(f"{rel}: row {row} ends in a huge cell", out,
                        must_report=[(rel, row, ANY)])
    if how == "bytes":
        out[rel] = draw(st.binary(min_size=1, max_size=200))
        return Mutation(f"{rel}: random bytes", out)
    cut = draw(st.integers(1, len(files[rel]) - 1))
    out[rel] = files[rel][:cut]
    return Mutation(f"{rel}: cut at byte {cut}", out)


@st.composite
def encodings(draw, files: dict[str, bytes]) -> Mutation:
    """A name with accents, the file saved as Latin-1 (read with a warning, the name kept),
    or as UTF-16 / with Windows-1252 quotes (not Latin-1 text: no crash is all that is asked)."""
    rel, column = draw(st.sampled_from([(BUSES, "name"), (BRANCHES, "name"),
                                        (POINTS, "note"), (POINTS, "substation")]))
    t = table(files, rel)
    row = draw(st.integers(2, len(t.rows) + 1))
    name = draw(st.sampled_from(NAMES))
    t.set(row, column, name)
    key = t.get(row, t.header[0])
    out = dict(files)
    how = draw(st.sampled_from(["latin-1", "utf-8", "utf-16", "cp1252-quotes"]))
    if how == "utf-16":
        out[rel] = t.text().encode("utf-16")
        return Mutation(f"{rel} as UTF-16", out)
    if how == "cp1252-quotes":
        out[rel] = t.text().encode("latin-1").replace(b"\xc9", b"\x93")
        return Mutation(f"{rel} with a Windows-1252 quote", out)
    out[rel] = t.text().encode(how)

    def kept(site: Site) -> None:
        frame = {BUSES: site.network.buses, BRANCHES: site.network.branches,
                 POINTS: site.points}[rel]
        assert frame.at[key, column] == name

    report = [(rel, ANY, None)] if how == "latin-1" else []
    return Mutation(f"{rel} row {row} {column}={name!r} as {how}", out, must_report=report,
                    must_load=column != "substation", expect=kept)


TOML_VALUES = ['""', '"  "', "0", "-5", "1e400", "nan", "inf", "true", "[1, 2]", '"x"',
               '"Europe/Nowhere"', '"UTC"', '"TDW_33"', '"WRF_132 "', "50", '"Brackwater"',
               "{ a = 1 }", "2026-04-14T06:00:00"]
KEYS = ["name", "base_mva", "frequency_hz", "timezone", "reference_bus"]


def _valid(key: str, literal: str) -> bool:
    """Whether ``key = literal`` is a usable setting (the folder format's rules)."""
    import tomllib

    value = tomllib.loads(f"v = {literal}")["v"]
    if key == "name":
        return (isinstance(value, str) and value.strip() != "") or (
            isinstance(value, int) and not isinstance(value, bool))
    if key in ("base_mva", "frequency_hz"):
        return (isinstance(value, int | float) and not isinstance(value, bool)
                and 0 < value < float("inf"))
    if key == "timezone":
        try:
            zoneinfo.ZoneInfo(value.strip())
        except (zoneinfo.ZoneInfoNotFoundError, ValueError, TypeError, AttributeError):
            return False
        return value.strip() != ""
    return isinstance(value, str) and value.strip() in {"WRF_132", "CSH_132", "CSH_33",
                                                        "EMB_132", "TDW_33"}


@st.composite
def site_settings(draw, files: dict[str, bytes]) -> Mutation:
    """``site.toml`` with a key removed, given another value, an unknown key, or broken."""
    lines = files["site.toml"].decode().splitlines()
    key = draw(st.sampled_from(KEYS))
    found = [i for i, ln in enumerate(lines) if ln.startswith(f"{key} =")]
    if not found:  # an earlier mutation removed it
        lines.append(f"{key} = 1")
    k = found[0] if found else len(lines) - 1
    how = draw(st.sampled_from(["remove", "value", "unknown", "broken"]))
    out = dict(files)
    if how == "remove":
        del lines[k]
        out["site.toml"] = "\n".join(lines).encode()
        optional = key == "reference_bus"
        return Mutation(f"site.toml: {key} removed", out, must_load=optional,
                        must_fail=not optional,
                        must_report=[] if optional else [("site.toml", None, key)])
    if how == "value":
        literal = draw(st.sampled_from(TOML_VALUES))
        lines[k] = f"{key} = {literal}"
        out["site.toml"] = "\n".join(lines).encode()
        valid = _valid(key, literal)
        return Mutation(f"site.toml: {key} = {literal}", out, must_fail=not valid,
                        must_report=[] if valid else [("site.toml", ANY, key)])
    if how == "unknown":
        lines.insert(draw(st.integers(1, len(lines))), "spare_setting = 3")
        out["site.toml"] = "\n".join(lines).encode()
        return Mutation("site.toml: unknown key", out, must_load=True,
                        must_report=[("site.toml", ANY, "spare_setting")])
    lines.insert(draw(st.integers(0, len(lines))), draw(st.sampled_from(
        ["name = ", "[site", "x = 'open", "= 3", "\x07"])))
    out["site.toml"] = "\n".join(lines).encode()
    return Mutation("site.toml: broken line", out, must_fail=True,
                    must_report=[("site.toml", ANY, None)])


def one_mutation(files: dict[str, bytes], reference: Site) -> st.SearchStrategy[Mutation]:
    """Any single mutation with its expectations."""
    return st.one_of(
        small_table_cell(files), snapshot_cell(files, reference), format_only(files, reference),
        snapshot_container(files, reference), snapshot_rows(files, reference), bad_rows(files),
        columns(files), offsets(files, reference), daylight_saving(files, reference),
        damaged_file(files), encodings(files), site_settings(files),
        hostile_parquet(files, reference),
    )


@st.composite
def stacked(draw, files: dict[str, bytes], reference: Site, most: int = 4) -> Mutation:
    """Up to ``most`` mutations applied one after the other (only the general rules hold)."""
    labels: list[str] = []
    current = dict(files)
    for _ in range(draw(st.integers(1, most))):
        try:
            m = draw(one_mutation(current, reference))
        except (KeyError, UnicodeDecodeError, ValueError, IndexError, InvalidArgument,
                csv.Error):
            continue  # a file an earlier mutation removed or made unreadable as text
        labels.append(m.label)
        current = m.files
    return Mutation(" + ".join(labels) or "nothing", current)
