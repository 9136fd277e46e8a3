"""A loaded site: network, point list, snapshots, and what the loader had to say."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from calibra.model.network import Network


@dataclass(frozen=True)
class LoadProblem:
    """One problem found while loading a site, located by file, row and column.

    ``row`` is the 1-based line number in the file as a spreadsheet shows it (header = 1),
    or None when the problem concerns the whole file or column. ``severity`` is ``"error"``
    (the site is not usable) or ``"warning"`` (loaded; something was skipped or repaired,
    and ``count`` says how many values).
    """

    file: str
    row: int | None
    column: str | None
    message: str
    severity: str = "error"
    count: int = 1

    def __str__(self) -> str:
        where = self.file
        if self.row is not None:
            where += f", row {self.row}"
        if self.column:
            where += f", column '{self.column}'"
        return f"{self.severity}: {where}: {self.message}"


@dataclass
class Site:
    """Everything calibra knows about one site folder.

    ``snapshots`` is a DataFrame indexed by tz-aware UTC timestamps with one float column per tag
    (NaN = missing); status points hold 1.0 (closed) / 0.0 (open).
    """

    path: Path | None
    name: str
    timezone: str
    network: Network
    points: pd.DataFrame
    snapshots: pd.DataFrame
    problems: list[LoadProblem] = field(default_factory=list)
    #: The rows of ``model-corrections.csv`` applied to ``network`` (ModelCorrection records).
    model_corrections: tuple = ()

    @property
    def errors(self) -> list[LoadProblem]:
        return [p for p in self.problems if p.severity == "error"]

    @property
    def warnings(self) -> list[LoadProblem]:
        return [p for p in self.problems if p.severity == "warning"]


class SiteLoadError(Exception):
    """Raised when a site cannot be used; carries every problem found."""

    def __init__(self, problems: list[LoadProblem]):
        self.problems = problems
        first = problems[0] if problems else "unknown problem"
        more = f" (and {len(problems) - 1} more)" if len(problems) > 1 else ""
        super().__init__(f"{first}{more}")
