"""Collecting load problems while reading a site, so that every problem is reported at once."""

from __future__ import annotations

from collections.abc import Iterable

from calibra.model.site import LoadProblem

#: Problems of one kind listed row by row before the rest are summed up in one line.
ROW_LIMIT = 20


class ProblemLog:
    """An ordered list of :class:`LoadProblem` with helpers to add errors and warnings."""

    def __init__(self) -> None:
        self.items: list[LoadProblem] = []

    def error(self, file: str, row: int | None, column: str | None, message: str) -> None:
        self.items.append(LoadProblem(file, row, column, message, "error", 1))

    def warning(
        self, file: str, row: int | None, column: str | None, message: str, count: int = 1
    ) -> None:
        self.items.append(LoadProblem(file, row, column, message, "warning", int(count)))

    def add(self, problem: LoadProblem) -> None:
        self.items.append(problem)

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
            self.items.append(LoadProblem(file, r, column, message, severity, 1))
        rest = rows[limit:]
        if rest:
            self.items.append(
                LoadProblem(
                    file, rest[0], column,
                    f"{message} (also in {len(rest)} more rows from this row on)",
                    severity, len(rest),
                )
            )

    @property
    def has_errors(self) -> bool:
        return any(p.severity == "error" for p in self.items)

    def error_count(self) -> int:
        return sum(p.severity == "error" for p in self.items)
