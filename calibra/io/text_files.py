"""Reading the text files of a site: encodings, separators, and small CSV tables.

Row numbers follow what a spreadsheet shows: the header is row 1, the first data record row 2,
and blank lines keep their row numbers.
"""

from __future__ import annotations

import csv
import gzip
import io
import re
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from calibra.io.problems import ProblemLog

SNIFF_CHARS = 64 * 1024
_LINE_END = re.compile(r"\r\n|\r|\n")
_DECIMAL_COMMA = re.compile(r"(?:^|[;\t])\s*[-+]?\d+,\d+\s*(?:[;\t]|$)", re.MULTILINE)


@dataclass(frozen=True)
class Dialect:
    """Field separator and decimal mark of a CSV file."""

    sep: str = ","
    decimal: str = "."

    def describe(self) -> str:
        names = {";": "semicolon", "\t": "tab", ",": "comma"}
        text = f"{names[self.sep]}-separated text"
        if self.decimal == ",":
            text += " with decimal commas"
        return text


def read_text(path: Path, rel: str, log: ProblemLog) -> str | None:
    """The decoded text of a file (``.gz`` decompressed); UTF-8 with or without BOM,
    else Latin-1 with a warning. Unreadable files are logged as errors and give None."""
    try:
        raw = path.read_bytes()
        if path.name.lower().endswith(".gz"):
            raw = gzip.decompress(raw)
    except (OSError, EOFError) as exc:
        log.error(rel, None, None, f"cannot read the file: {exc}")
        return None
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        log.warning(
            rel, line, None,
            "not valid UTF-8 (first bad byte in this row); read as Latin-1 (ISO 8859-1) — "
            "check accented names",
        )
        return raw.decode("latin-1")


def sniff_dialect(text: str) -> Dialect:
    """Guess the separator from the header line and the decimal mark from the data (the
    first 64 KiB are enough to decide)."""
    text = _LINE_END.sub("\n", text[:SNIFF_CHARS])
    head = text.lstrip("\r\n").split("\n", 1)[0]
    counts = {sep: head.count(sep) for sep in (",", ";", "\t")}
    sep = max(counts, key=lambda s: (counts[s], s == ","))
    if counts[sep] == 0:
        sep = ","
    decimal = "."
    if sep != ",":
        body = text.lstrip("\r\n").split("\n", 1)[-1]
        if _DECIMAL_COMMA.search(body.replace("\t", ";") if sep == "\t" else body):
            decimal = ","
    return Dialect(sep, decimal)


def first_line(text: str) -> str:
    """The text up to the first line end: LF, CR LF (Windows) or CR alone (classic Mac,
    Excel's "CSV (Macintosh)")."""
    return _LINE_END.split(text, maxsplit=1)[0]


def csv_records(text: str, sep: str):
    """The records of CSV text, whatever its line ends (quoted line breaks kept)."""
    return csv.reader(io.StringIO(text, newline=""), delimiter=sep)


def header_problem(text: str) -> str | None:
    """Why the text has no usable first row (empty file, or an empty row 1), else None."""
    if not text.strip():
        return "the file is empty"
    if not first_line(text).strip():
        return "row 1 is empty: the column names must be in the first row"
    return None


def source_text(source: str | Path, log: ProblemLog) -> tuple[str | None, str]:
    """The text of a network file and the label its problems carry: ``source`` is a path, or
    the file's text itself when it contains a line break (label ``<text>``). None, with an
    error logged, when the file is missing or unreadable."""
    if isinstance(source, str) and "\n" in source:
        return source, "<text>"
    path = Path(source)
    text = read_text(path, path.name, log) if path.is_file() else None
    if text is None and not log.items:
        log.error(path.name, None, None, "file not found")
    return text, path.name


def read_csv_text(path: Path, rel: str, log: ProblemLog) -> tuple[str, Dialect] | None:
    """The decoded text of a CSV file and its dialect (a warning when not comma-separated);
    None, with an error logged, when it cannot be read, is empty or does
    not start with its header."""
    text = read_text(path, rel, log)
    if text is None:
        return None
    problem = header_problem(text)
    if problem is not None:
        log.error(rel, None if problem == "the file is empty" else 1, None, problem)
        return None
    dialect = sniff_dialect(text)
    if dialect.sep != ",":
        log.warning(rel, None, None, f"read as {dialect.describe()}")
    return text, dialect


@dataclass
class RawTable:
    """A table read as stripped text (from CSV or a spreadsheet sheet).

    ``columns`` maps each named header column (lower-cased; a required column that is missing
    from the file is absent here too) to its cells, a numpy array of ``str``; ``rows`` holds
    the spreadsheet row number of each record; ``labels`` the column as problems name it where
    that is not calibra's name (a header alias, a spreadsheet column letter).
    """

    file: str
    columns: dict[str, np.ndarray]
    rows: np.ndarray
    dialect: Dialect
    labels: dict[str, str] = field(default_factory=dict)

    def has(self, column: str) -> bool:
        return column in self.columns

    def cells(self, column: str) -> np.ndarray:
        """The cells of ``column``; empty text for every record when the column is absent."""
        found = self.columns.get(column)
        return found if found is not None else np.full(len(self.rows), "", dtype=object)


#: Calibra's column name for each header cell (None: a column already reported and not
#: read); the default lower-cases the header.
HeaderNames = Callable[[list[str]], list[str | None]]


def _lower_names(header: list[str]) -> list[str | None]:
    return [h.strip().lower() for h in header]


def read_small_table(
    path: Path, rel: str, log: ProblemLog, required: list[str], optional: list[str],
    names: HeaderNames = _lower_names,
) -> RawTable | None:
    """Read a CSV table of the network or point list and check its header (see
    :func:`table_from_records`). Returns None only when there is nothing to read (missing,
    unreadable or empty file, or no data rows)."""
    if not path.is_file():
        log.error(rel, None, None, "file not found")
        return None
    found = read_csv_text(path, rel, log)
    if found is None:
        return None
    text, dialect = found
    records: list[list[str]] = []
    try:
        for record in csv_records(text, dialect.sep):
            records.append(record)
    except csv.Error as exc:  # e.g. a cell longer than the csv module's field limit
        log.error(rel, len(records) + 1, None, f"not readable as CSV: {exc}")
        return None
    body = list(enumerate(records[1:], start=2))
    header = [h.strip() for h in records[0]]
    return table_from_records(rel, header, 1, body, dialect, log, required, optional,
                              names=names)


def table_from_records(
    rel: str,
    header: list[str],
    header_row: int,
    body: list[tuple[int, list[str]]],
    dialect: Dialect,
    log: ProblemLog,
    required: list[str],
    optional: list[str],
    *,
    names: HeaderNames = _lower_names,
    letters: list[str] | None = None,
) -> RawTable | None:
    """The table of a header and its records (row number, cells) with the header checked.

    Missing required columns and duplicate column names are errors; unknown columns are
    warnings (ignored); values beyond the last named column are errors. ``letters`` (a
    spreadsheet's column letters) are added to the column names problems give.
    """
    width = len(header)
    values: list[list[str]] = []
    rows: list[int] = []
    for number, record in body:
        cells = [c.strip() for c in record]
        if not any(cells):
            continue
        if len(cells) > width:
            if any(cells[width:]):
                log.error(
                    rel, number, None,
                    f"row has {len(cells)} values but the header names {width} columns",
                )
            cells = cells[:width]
        values.append(cells + [""] * (width - len(cells)))
        rows.append(number)
    if not values:
        log.error(rel, None, None, "the table has a header but no data rows")
        return None
    data = np.array(values, dtype=object).reshape(len(values), width)
    read_as = names(header)
    keep: dict[int, str] = {}
    seen: dict[str, int] = {}
    for pos, name in enumerate(read_as):
        if name is None:
            continue
        if name == "":
            if (data[:, pos] != "").any():
                log.error(rel, header_row, None,
                          f"column {pos + 1} has values but no name in the header")
        elif name in seen:
            first = seen[name] - 1
            if header[first].lower() == header[pos].lower():
                message = f"column appears twice (columns {first + 1} and {pos + 1})"
            else:
                message = (f"columns {first + 1} ('{header[first]}') and {pos + 1} "
                           f"('{header[pos]}') both read as {name}; keep one, or name the "
                           f"one to read in site.toml ([points.columns] {name} = \"…\")")
            log.error(rel, header_row, name, message)
        else:
            seen[name] = pos + 1
            keep[pos] = name
    for name in required:
        if name not in seen:
            log.error(rel, header_row, name, "required column is missing")
    known = set(required) | set(optional)
    for name in seen:
        if name not in known:
            log.warning(rel, header_row, name if letters is None
                        else f"{header[seen[name] - 1]} ({letters[seen[name] - 1]})",
                        "unknown column; ignored")
            keep = {p: n for p, n in keep.items() if n != name}
    columns = {name: data[:, pos] for pos, name in keep.items()}
    labels = {}
    for pos, name in keep.items():
        shown = header[pos] if header[pos].lower() != name else name
        label = shown if letters is None else f"{shown} ({letters[pos]})"
        if label != name:
            labels[name] = label
    return RawTable(rel, columns, np.asarray(rows, dtype=int), dialect, labels)
