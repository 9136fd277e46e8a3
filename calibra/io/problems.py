"""Collecting load problems while reading a site, so that every problem is reported at once."""

from __future__ import annotations

import csv
import unicodedata
from collections.abc import Iterable
from dataclasses import replace
from pathlib import Path

from calibra.model.site import LoadProblem

#: Problems of one kind listed row by row before the rest are summed up in one line.
ROW_LIMIT = 20


def one_line(text: str) -> str:
    """``text`` with line breaks and other control characters written as escapes
    (``\\n``, ``\\x00``…), so that a problem always prints as one line."""
    if text.isprintable():
        return text
    return "".join(
        ch.encode("unicode_escape").decode("ascii")
        if unicodedata.category(ch) in ("Cc", "Zl", "Zp") else ch
        for ch in text
    )


def _problem(
    file: str, row: int | None, column: str | None, message: str, severity: str, count: int
) -> LoadProblem:
    return LoadProblem(one_line(file), row, None if column is None else one_line(column),
                       one_line(message), severity, int(count))


class ProblemLog:
    """An ordered list of :class:`LoadProblem` with helpers to add errors and warnings.

    Files, columns and messages are kept on one line (cell text may hold line breaks)."""

    def __init__(self) -> None:
        self.items: list[LoadProblem] = []

    def error(self, file: str, row: int | None, column: str | None, message: str) -> None:
        self.items.append(_problem(file, row, column, message, "error", 1))

    def warning(
        self, file: str, row: int | None, column: str | None, message: str, count: int = 1
    ) -> None:
        self.items.append(_problem(file, row, column, message, "warning", count))

    def add(self, problem: LoadProblem) -> None:
        self.items.append(_problem(problem.file, problem.row, problem.column, problem.message,
                                   problem.severity, problem.count))

    def per_row(
        self,
        file: str,
        rows: Iterable[int],
        column: str | None,
        message: str,
        severity: str = "warning",
        limit: int = ROW_LIMIT,
    ) -> None:
        """One problem per row up to ``limit``, then one more line counting the rest."""
        rows = [int(r) for r in rows]
        for r in rows[:limit]:
            self.items.append(_problem(file, r, column, message, severity, 1))
        rest = rows[limit:]
        if rest:
            self.items.append(_problem(
                file, rest[0], column,
                f"{message} (also in {len(rest)} more rows from this row on)",
                severity, len(rest),
            ))

    def relabel(self, since: int, file: str, labels: dict[str, str]) -> None:
        """Name the columns of ``file``'s problems from position ``since`` on by ``labels``
        (calibra's column name → the column as the file shows it)."""
        for i in range(since, len(self.items)):
            p = self.items[i]
            if p.file == file and p.column in labels:
                self.items[i] = replace(p, column=one_line(labels[p.column]))

    @property
    def has_errors(self) -> bool:
        return any(p.severity == "error" for p in self.items)

    def error_count(self) -> int:
        return sum(p.severity == "error" for p in self.items)


#: The columns of a written problem list, in order.
PROBLEM_COLUMNS = ("severity", "file", "row", "column", "count", "message")


def write_problem_list(path: Path, problems: Iterable[LoadProblem]) -> int:
    """Write ``problems`` (repeats left out, order kept) as a CSV table with
    :data:`PROBLEM_COLUMNS`, one problem a row; the number written."""
    seen: set[tuple] = set()
    rows = []
    for p in problems:
        key = (p.severity, p.file, p.row, p.column, p.count, p.message)
        if key not in seen:
            seen.add(key)
            rows.append(["" if v is None else v for v in key])
    with open(path, "w", newline="", encoding="utf-8") as fh:
        out = csv.writer(fh)
        out.writerow(PROBLEM_COLUMNS)
        out.writerows(rows)
    return len(rows)
