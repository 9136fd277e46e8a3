"""Which header of a user's point list (CSV or spreadsheet) holds which of calibra's columns,
worked out before a site folder is built from it (``calibra import``).

The rule is the loader's (:mod:`calibra.io.point_columns`): a mapping the user gives first,
then calibra's own names and the recognised names of :data:`COLUMN_ALIASES`. What is found is
data (:class:`PointListMapping`): each column with the header it is read from, how it was
placed and the first values; the headers no column takes; the tags. A required column that
cannot be placed, an unknown column name in the mapping, a mapped header the file does not
have, or two headers that read as one column are problems naming the file (and sheet) and the
headers it has.
"""

from __future__ import annotations

import csv
import enum
from dataclasses import dataclass, field
from pathlib import Path

from calibra.io.point_columns import recognised_column
from calibra.io.points_config import fold_header
from calibra.io.problems import ProblemLog
from calibra.io.spreadsheet import SPREADSHEET_SUFFIXES, read_sheet
from calibra.io.text_files import csv_records, read_csv_text
from calibra.model.points import POINT_COLUMNS, REQUIRED_POINT_COLUMNS

#: Every column of calibra's point list, the tag first.
ALL_COLUMNS = ("tag", *POINT_COLUMNS)
REQUIRED_COLUMNS = ("tag", *REQUIRED_POINT_COLUMNS)
POINT_LIST_SUFFIXES = (".csv", *SPREADSHEET_SUFFIXES)
SAMPLE_ROWS = 3


class Placement(enum.StrEnum):
    """How a column's header was found."""

    GIVEN = "given"  # named by the user (--column, or [points.columns])
    OWN_NAME = "calibra's name"
    RECOGNISED = "recognised name"


@dataclass(frozen=True)
class ColumnMatch:
    """One of calibra's columns read from ``header`` (with its spreadsheet letter, or its
    position in a CSV file), how it was placed, and the first values under it."""

    column: str
    header: str
    where: str
    placement: Placement
    samples: tuple[str, ...]


@dataclass(frozen=True)
class PointListMapping:
    """The point list's mapping: ``file`` as problems name it (``points.xlsx [Sheet1]``),
    the sheet read (None for CSV), the matches in calibra's column order, the headers no
    column takes, the data rows and their tags and elements (for the preview's counts)."""

    file: str
    sheet: str | None
    matches: tuple[ColumnMatch, ...]
    unplaced: tuple[str, ...]
    rows: int
    tags: tuple[str, ...] = ()
    elements: tuple[str, ...] = field(default=(), repr=False)

    def columns(self) -> dict[str, str]:
        """calibra's column → the file's header, as ``[points.columns]`` holds it."""
        return {m.column: m.header for m in self.matches}

    def header_of(self, column: str) -> str | None:
        return next((m.header for m in self.matches if m.column == column), None)


def csv_table(path: Path, label: str,
              log: ProblemLog) -> tuple[list[str], list[list[str]]] | None:
    """A CSV file's header and records as stripped text; None, with an error logged, when it
    cannot be read."""
    found = read_csv_text(path, label, log)
    if found is None:
        return None
    text, dialect = found
    try:
        records = list(csv_records(text, dialect.sep))
    except csv.Error as exc:
        log.error(label, None, None, f"not readable as CSV: {exc}")
        return None
    return [h.strip() for h in records[0]], [[c.strip() for c in r] for r in records[1:]]


def _read(path: Path, label: str, sheet: str | None, log: ProblemLog):
    """(file as problems name it, the sheet read, header, where each header is, data rows);
    None, with an error logged, when the file cannot be read."""
    suffix = path.suffix.lower()
    if suffix not in POINT_LIST_SUFFIXES:
        log.error(label, None, None, "not a point list this program reads (files ending "
                  f"{suffix or 'in nothing'} are not; give {', '.join(POINT_LIST_SUFFIXES)}: "
                  "save a spreadsheet in one of these formats)")
        return None
    if suffix == ".csv":
        if sheet is not None:
            log.error(label, None, None, f"a sheet ('{sheet}') was named, but a CSV file has no "
                      "sheets")
            return None
        table = csv_table(path, label, log)
        if table is None:
            return None
        header, body = table
        return label, None, header, [f"column {k + 1}" for k in range(len(header))], body
    read = read_sheet(path, label, sheet, log, ("--sheet", None, None))
    if read is None:
        return None
    return (read.file, read.file[len(label) + 2:-1], [h.strip() for h in read.header],
            read.letters, [row for _, row in read.body])


def point_list_headers(path: Path, sheet: str | None, log: ProblemLog) -> list[str] | None:
    """The header of a point list (of ``sheet`` of a spreadsheet; None: the first): what a
    mapping can name. None, with an error logged, when it cannot be read."""
    found = _read(path, str(path), sheet, log)
    return None if found is None else [h for h in found[2] if h]


def map_point_list(path: Path, label: str, given: dict[str, str], sheet: str | None,
                   log: ProblemLog) -> PointListMapping | None:
    """The mapping of the point list at ``path`` (problems name it ``label``): ``given`` holds
    the user's mapping (calibra column → header), ``sheet`` the sheet of a spreadsheet (None:
    the first). None, with errors logged, when the file cannot be read or a required column
    cannot be placed."""
    found = _read(path, label, sheet, log)
    if found is None:
        return None
    file, sheet_name, header, where, body = found
    body = [row for row in body if any(c.strip() for c in row)]
    return _mapping(file, sheet_name, header, where, body, given, log)


def _mapping(file: str, sheet: str | None, header: list[str], where: list[str],
             body: list[list[str]], given: dict[str, str], log: ProblemLog
             ) -> PointListMapping | None:
    seen = ", ".join(f"'{h}'" for h in header if h) or "none"
    folded = [fold_header(h) for h in header]
    placed: dict[str, tuple[int, Placement]] = {}
    errors = log.error_count()
    for column, wanted in given.items():
        if column not in ALL_COLUMNS:
            log.error(file, None, column, "not a column of calibra's point list (one of "
                      + ", ".join(ALL_COLUMNS) + ")")
        elif fold_header(wanted) not in folded:
            log.error(file, 1 if sheet is None else None, column,
                      f"'{wanted}' is not a header of this file (its headers: {seen})")
        else:
            placed[column] = (folded.index(fold_header(wanted)), Placement.GIVEN)
    taken = {k for k, _ in placed.values()}
    unplaced = []
    for k, text in enumerate(header):
        if not text or k in taken:
            continue
        column = recognised_column(text)
        if column is None or column in placed and placed[column][1] is Placement.GIVEN:
            unplaced.append(text)
            continue
        if column in placed:
            first = placed[column][0]
            log.error(file, None, column,
                      f"two headers read as {column}: '{header[first]}' ({where[first]}) and "
                      f"'{text}' ({where[k]}); name the one to read (e.g. --column "
                      f"{column}=\"{header[first]}\")")
            continue
        own = fold_header(text) == fold_header(column)
        placed[column] = (k, Placement.OWN_NAME if own else Placement.RECOGNISED)
    for column in REQUIRED_COLUMNS:
        if column not in placed:
            log.error(file, None, column,
                      f"no header holds calibra's column '{column}' (the headers: {seen}); "
                      f"name it, e.g. --column {column}=\"HEADER\"")
    if log.error_count() > errors:
        return None
    matches = []
    for column in ALL_COLUMNS:
        if column in placed:
            k, how = placed[column]
            values = tuple(row[k] if k < len(row) else "" for row in body[:SAMPLE_ROWS])
            matches.append(ColumnMatch(column, header[k], where[k], how, values))

    def cells(column: str) -> tuple[str, ...]:
        k = placed[column][0]
        return tuple(row[k].strip() if k < len(row) else "" for row in body)

    return PointListMapping(file, sheet, tuple(matches), tuple(unplaced), len(body),
                            tuple(t for t in cells("tag") if t), cells("element"))
