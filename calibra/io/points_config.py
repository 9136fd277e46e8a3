"""The ``[points]`` table of ``site.toml``: which sheet of a spreadsheet point list to read
and which of the file's headers hold calibra's columns.

```toml
[points]
sheet = "Analogs"              # default: the first sheet

[points.columns]               # calibra's column = the file's header
tag = "SCADA point"
full_scale = "Span (eng)"
```
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

from calibra.io.problems import ProblemLog
from calibra.model.points import POINT_COLUMNS

POINTS_TABLE = "points"
_KEYS = ("sheet", "columns")


@dataclass(frozen=True)
class PointsConfig:
    """``sheet``: the sheet to read (None: the first); ``columns``: calibra's column name →
    the header that holds it; ``lines``: the ``site.toml`` line of each entry (for messages)."""

    sheet: str | None = None
    columns: dict[str, str] = field(default_factory=dict)
    lines: dict[str, int | None] = field(default_factory=dict)


def _section_end(text: str, start: int) -> int:
    following = re.compile(r"^[ \t]*\[", re.MULTILINE).search(text, start)
    return following.start() if following else len(text)


def key_line(text: str, key: str, table: str = POINTS_TABLE) -> int | None:
    """The line of ``key =`` inside ``[table]`` (dotted table names such as
    ``points.columns`` allowed), else the line of the table's header, else None."""
    name = r"\s*\.\s*".join(re.escape(part) for part in table.split("."))
    header = re.search(rf"^[ \t]*\[[ \t]*{name}[ \t]*\]", text, re.MULTILINE)
    if header is None:
        return None
    end = _section_end(text, header.end())
    found = re.compile(rf"^[ \t]*[\"']?{re.escape(key)}[\"']?[ \t]*=", re.MULTILINE).search(
        text, header.end(), end)
    at = found.start() if found else header.start()
    return text.count("\n", 0, at) + 1


def read_points_config(doc: dict, text: str, rel: str, log: ProblemLog) -> PointsConfig:
    """The ``[points]`` table of the parsed ``site.toml`` (``doc``, source ``text``); an empty
    configuration when there is none. Unusable entries are errors naming their line and key
    and are left out."""
    table = doc.get(POINTS_TABLE)
    if table is None:
        return PointsConfig()
    if not isinstance(table, dict):
        top = re.search(rf"^[ \t]*{POINTS_TABLE}[ \t]*=", text, re.MULTILINE)
        log.error(rel, text.count("\n", 0, top.start()) + 1 if top else None, POINTS_TABLE,
                  "must be a table ([points]), not a single value")
        return PointsConfig()
    for key in table:
        if key not in _KEYS:
            log.warning(rel, key_line(text, key), key, "unknown key in [points]; ignored")
    sheet = table.get("sheet")
    lines: dict[str, int | None] = {"sheet": key_line(text, "sheet")}
    if sheet is not None and (not isinstance(sheet, str) or not sheet.strip()):
        log.error(rel, lines["sheet"], "sheet",
                  f"must be the name of a sheet (a non-empty text), not {sheet!r}")
        sheet = None
    columns = table.get("columns", {})
    if not isinstance(columns, dict):
        log.error(rel, key_line(text, "columns"), "columns",
                  "must be a table ([points.columns]) of calibra column = \"header in the file\"")
        columns = {}
    mapping: dict[str, str] = {}
    given: dict[str, str] = {}
    for key, header in columns.items():
        line = key_line(text, key, f"{POINTS_TABLE}.columns") or key_line(text, key)
        lines[key] = line
        if key not in POINT_COLUMNS and key != "tag":
            log.error(rel, line, key, "not a column of calibra's point list (one of "
                      + ", ".join(["tag", *POINT_COLUMNS]) + ")")
            continue
        if not isinstance(header, str) or not header.strip():
            log.error(rel, line, key,
                      f"must be a header of the point list (a non-empty text), not {header!r}")
            continue
        folded = fold_header(header)
        if folded in given:
            log.error(rel, line, key,
                      f"'{header}' is already given for {given[folded]}; one header holds one "
                      "column")
            continue
        given[folded] = key
        mapping[key] = header.strip()
    return PointsConfig(sheet.strip() if sheet else None, mapping, lines)


def fold_header(text: str) -> str:
    """A header as it is compared: case folded, ``_`` as a space, runs of spaces as one."""
    return " ".join(str(text).replace("_", " ").casefold().split())
