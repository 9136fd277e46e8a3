"""Building a site folder from the exports an engineer already has (``calibra import``): a
historian export (one or more files), a point list (CSV or spreadsheet) and a network file
(MATPOWER case, IEEE Common Data Format, or a ``buses.csv``/``branches.csv`` pair).

:func:`plan_import` checks the inputs and works out everything the folder will hold without
writing anything: the point list's column mapping (:mod:`calibra.io.import_mapping`), the
exports' kinds, tags, times and interval (:mod:`calibra.io.import_history`), the network's
size. :func:`build_site` then copies the user's files unchanged into a temporary sibling of
the target with a ``site.toml`` holding the mapping and settings used, and renames it to the
target at the end, so an interruption leaves no half-written folder. The folder is then loaded
by the ordinary loader, whose problems name every skipped or refused row.
"""

from __future__ import annotations

import enum
import json
import os
import shutil
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from calibra.io.cdf import parse_cdf
from calibra.io.import_history import HistorySummary, history_suffix_ok, scan_history
from calibra.io.import_mapping import PointListMapping, csv_table, map_point_list
from calibra.io.matpower import MATPOWER_SUFFIXES, parse_matpower
from calibra.io.network_tables import BRANCHES_FILE, BUSES_FILE
from calibra.io.point_source import POINTS_FILE
from calibra.io.problems import ProblemLog, write_problem_list
from calibra.io.site_config import SITE_FILE, check_timezone
from calibra.io.site_folder import CDF_SUFFIXES, load_site
from calibra.io.snapshot_reports import SNAPSHOT_DIR
from calibra.io.text_files import read_text
from calibra.model.site import LoadProblem, Site, SiteLoadError
from calibra.progress import Progress

#: The usual system base of per-unit impedances (common practice, no source).
DEFAULT_BASE_MVA = 100.0
COPY_BLOCK = 4 * 2**20


class ImportRefused(Exception):
    """The inputs cannot make a site folder; ``problems`` says why, naming the files."""

    def __init__(self, problems: list[LoadProblem]):
        super().__init__("; ".join(str(p) for p in problems))
        self.problems = problems


class NetworkFormat(enum.StrEnum):
    MATPOWER = "MATPOWER case file"
    CDF = "IEEE Common Data Format file"
    TABLES = "buses.csv and branches.csv tables"


@dataclass(frozen=True)
class SiteFields:
    """What ``[site]`` and ``[snapshots]`` of ``site.toml`` will say. ``base_mva`` None: the
    network file's base, or :data:`DEFAULT_BASE_MVA` with tables; ``interval`` None: inferred
    from the exports and written down; ``max_age`` None: one interval (the loader's default)."""

    name: str
    timezone: str
    frequency_hz: float
    base_mva: float | None = None
    reference_bus: str | None = None
    interval: pd.Timedelta | None = None
    max_age: pd.Timedelta | None = None


@dataclass(frozen=True)
class ImportRequest:
    """The target folder, the user's files, the site fields and the user's column mapping
    (calibra column → header) and sheet; ``replace``: an existing non-empty target is moved
    aside (renamed, never deleted) instead of refused."""

    target: Path
    history: tuple[Path, ...]
    point_list: Path
    network: tuple[Path, ...]
    fields: SiteFields
    columns: dict[str, str] = field(default_factory=dict)
    sheet: str | None = None
    replace: bool = False


@dataclass(frozen=True)
class NetworkSummary:
    """The network's format, its size and ids, and its base (None for tables)."""

    format: NetworkFormat
    buses: int
    branches: int
    base_mva: float | None
    bus_ids: frozenset[str]
    branch_ids: frozenset[str]


@dataclass(frozen=True)
class ImportPlan:
    """Everything the folder will hold: each copy (the user's file → its path in the
    folder), the point list's mapping, the exports' summary, the network's summary and the
    base used; ``notes`` state the choices made for the user (an assumed base, an inferred
    interval); ``warnings`` what the readers found while planning (the loader reports them
    again once the folder is built)."""

    request: ImportRequest
    copies: tuple[tuple[Path, str], ...]
    mapping: PointListMapping
    history: HistorySummary
    network: NetworkSummary
    base_mva: float | None
    notes: tuple[str, ...]
    warnings: tuple[LoadProblem, ...] = ()

    def export_tags_not_listed(self) -> list[str]:
        return sorted(self.history.tags - set(self.mapping.tags))

    def listed_tags_not_exported(self) -> list[str]:
        return sorted(set(self.mapping.tags) - self.history.tags)

    def unknown_elements(self) -> list[str]:
        """Elements of the point list that are neither a bus nor a branch of the network."""
        known = self.network.bus_ids | self.network.branch_ids
        return sorted({e for e in self.mapping.elements if e and e not in known})


def _label(path: Path) -> str:
    return str(path)


def _check_files(request: ImportRequest, log: ProblemLog) -> None:
    for path in (*request.history, request.point_list, *request.network):
        if not path.exists():
            log.error(_label(path), None, None, "file not found")
        elif not path.is_file():
            log.error(_label(path), None, None, "not a file")
    names: dict[str, Path] = {}
    for path in request.history:
        if not history_suffix_ok(path):
            log.error(_label(path), None, None, "not a historian export this program reads "
                      "(give .csv, .csv.gz or .parquet files)")
        elif path.name in names and names[path.name] != path:
            log.error(_label(path), None, None, f"has the same name as {names[path.name]}; "
                      "the folder's snapshots/ would hold one of them: rename one")
        names.setdefault(path.name, path)


def _check_fields(fields: SiteFields, log: ProblemLog) -> None:
    if not fields.name.strip():
        log.error(SITE_FILE, None, "name", "the site needs a name")
    if (why := check_timezone(fields.timezone)) is not None:
        log.error(SITE_FILE, None, "timezone", why)
    for key, value in (("frequency_hz", fields.frequency_hz), ("base_mva", fields.base_mva)):
        if value is not None and not 0 < value < float("inf"):
            log.error(SITE_FILE, None, key, f"must be a number greater than zero, not {value:g}")
    for key, value in (("interval", fields.interval), ("max_age", fields.max_age)):
        if value is not None and value <= pd.Timedelta(0):
            log.error(SITE_FILE, None, key, "must be a duration greater than zero")


def _check_target(request: ImportRequest, log: ProblemLog) -> None:
    target = request.target
    if target.exists() and not target.is_dir():
        log.error(_label(target), None, None, "exists and is not a folder")
    elif target.is_dir() and any(target.iterdir()) and not request.replace:
        log.error(_label(target), None, None, "the folder exists and is not empty; choose a new "
                  "folder, or ask to replace it (the old folder is then kept beside it, renamed)")


def _network(paths: tuple[Path, ...], frequency_hz: float, log: ProblemLog
             ) -> tuple[NetworkSummary, tuple[tuple[Path, str], ...]] | None:
    """The network files read, and where they go in the folder."""
    suffixes = [p.suffix.lower() for p in paths]
    if len(paths) == 1 and suffixes[0] in MATPOWER_SUFFIXES + CDF_SUFFIXES:
        path = paths[0]
        matpower = suffixes[0] in MATPOWER_SUFFIXES
        text = read_text(path, _label(path), log)
        if text is None:
            return None
        parse = parse_matpower if matpower else parse_cdf
        case = parse(text, _label(path), log, frequency_hz=frequency_hz)
        if case is None:
            return None
        net = case.network
        summary = NetworkSummary(NetworkFormat.MATPOWER if matpower else NetworkFormat.CDF,
                                 net.n_bus, net.n_branch, case.base_mva,
                                 frozenset(net.buses.index), frozenset(net.branches.index))
        return summary, ((path, f"network/{path.name}"),)
    if len(paths) == 2 and suffixes == [".csv", ".csv"]:
        return _tables(paths, log)
    log.error(", ".join(_label(p) for p in paths), None, None,
              "give one network file (a MATPOWER case .m, or an IEEE Common Data Format .cdf or "
              ".txt) or two tables (buses and branches, .csv)")
    return None


def _tables(paths: tuple[Path, ...], log: ProblemLog):
    ids: dict[str, tuple[Path, list[str]]] = {}
    for path in paths:
        table = csv_table(path, _label(path), log)
        if table is None:
            return None
        header, body = table
        lower = [h.lower() for h in header]
        kind = "branch" if "branch" in lower else "bus" if "bus" in lower else None
        if kind is None or kind in ids:
            log.error(_label(path), 1, None, "cannot tell whether this is the bus or the branch "
                      "table (the bus table has a column 'bus', the branch table 'branch')")
            return None
        at = lower.index(kind)
        ids[kind] = (path, [r[at].strip() for r in body if len(r) > at and r[at].strip()])
    buses, branches = ids["bus"], ids["branch"]
    summary = NetworkSummary(NetworkFormat.TABLES, len(buses[1]), len(branches[1]), None,
                             frozenset(buses[1]), frozenset(branches[1]))
    return summary, ((buses[0], BUSES_FILE), (branches[0], BRANCHES_FILE))


def plan_import(request: ImportRequest, progress: Progress | None = None) -> ImportPlan:
    """Check the inputs and work out the folder (nothing is written). Raises
    :class:`ImportRefused` with every problem found when the inputs cannot make a site."""
    log = ProblemLog()
    _check_files(request, log)
    _check_fields(request.fields, log)
    _check_target(request, log)
    if log.has_errors:
        raise ImportRefused(log.items)
    fields = request.fields
    found = _network(request.network, fields.frequency_hz, log)
    mapping = map_point_list(request.point_list, _label(request.point_list), request.columns,
                             request.sheet, log)
    if found is None or mapping is None or log.has_errors:
        raise ImportRefused([p for p in log.items if p.severity == "error"])
    network, network_copies = found
    notes = []
    base = fields.base_mva
    if network.base_mva is not None:
        if base is not None and base != network.base_mva:
            log.error(_label(request.network[0]), None, "base_mva",
                      f"the file's base is {network.base_mva:g} MVA, not the {base:g} MVA asked "
                      "for; leave the base out to use the file's")
        base = None  # the file's own
    elif base is None:
        base = DEFAULT_BASE_MVA
        notes.append(f"base_mva = {base:g} MVA assumed (the usual system base of the tables' "
                     "per-unit impedances); give the base if the tables use another")
    ref = fields.reference_bus
    if ref is not None and ref not in network.bus_ids:
        log.error(SITE_FILE, None, "reference_bus", f"bus '{ref}' is not a bus of the network")
    labels = [_label(p) for p in request.history]
    history = scan_history(list(request.history), labels, fields.timezone, log, progress,
                           fields.interval)
    if log.has_errors:
        raise ImportRefused([p for p in log.items if p.severity == "error"])
    if history.interval is not None and fields.interval is None:
        notes.append(f"snapshot interval {_toml_duration(history.interval)} "
                     f"{history.interval_note}; written to [snapshots] of site.toml")
    point_name = POINTS_FILE if request.point_list.suffix.lower() == ".csv" else \
        f"points{request.point_list.suffix.lower()}"
    copies = (*network_copies, (request.point_list, point_name),
              *((p, f"{SNAPSHOT_DIR}/{p.name}") for p in request.history))
    return ImportPlan(request, tuple(copies), mapping, history, network, base, tuple(notes),
                      tuple(p for p in log.items if p.severity == "warning"))


def _toml_duration(t: pd.Timedelta) -> str:
    seconds = int(t.total_seconds())
    if seconds and seconds % 3600 == 0:
        return f"{seconds // 3600}h"
    return f"{seconds // 60}min" if seconds and seconds % 60 == 0 else f"{t.total_seconds():g}s"


def _string(text: str) -> str:
    return json.dumps(text, ensure_ascii=False)  # a TOML basic string


def site_toml(plan: ImportPlan) -> str:
    """The ``site.toml`` the folder gets: the fields, the mapping used, the snapshot grid."""
    fields = plan.request.fields
    lines = ["# Written by calibra import. The files beside it are the user's, copied unchanged:"]
    lines += [f"#   {dest} <- {src}" for src, dest in plan.copies
              if not dest.startswith(SNAPSHOT_DIR)]
    lines += [f"#   {SNAPSHOT_DIR}/ <- {len(plan.request.history)} historian export(s)", "",
              "[site]", f"name = {_string(fields.name.strip())}"]
    if plan.base_mva is not None:
        lines.append(f"base_mva = {plan.base_mva!r}")
    lines += [f"frequency_hz = {float(fields.frequency_hz)!r}",
              f"timezone = {_string(fields.timezone)}"]
    if fields.reference_bus is not None:
        lines.append(f"reference_bus = {_string(fields.reference_bus)}")
    if plan.mapping.sheet is not None:
        lines += ["", "[points]", f"sheet = {_string(plan.mapping.sheet)}"]
    lines += ["", "[points.columns]  # calibra's column = the point list's header"]
    lines += [f"{column} = {_string(header)}" for column, header in plan.mapping.columns().items()]
    interval = plan.history.interval
    if interval is not None or fields.max_age is not None:
        lines += ["", "[snapshots]"]
        if interval is not None:
            how = "" if fields.interval is not None else f"  # {plan.history.interval_note}"
            lines.append(f"interval = \"{_toml_duration(interval)}\"{how}")
        if fields.max_age is not None:
            lines.append(f"max_age = \"{_toml_duration(fields.max_age)}\"")
    return "\n".join(lines) + "\n"


def _copy(source: Path, destination: Path, done: list[int], total: int,
          progress: Progress | None) -> None:
    with source.open("rb") as src, destination.open("wb") as dst:
        while block := src.read(COPY_BLOCK):
            dst.write(block)
            done[0] += len(block)
            if progress is not None:
                progress.update(done[0], total, "copying the files")
    shutil.copystat(source, destination)


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def _aside(target: Path) -> Path:
    stamp = pd.Timestamp.now(tz="UTC").strftime("%Y%m%d-%H%M%S")
    candidate, n = target.with_name(f"{target.name}.replaced-{stamp}"), 1
    while candidate.exists():
        n += 1
        candidate = target.with_name(f"{target.name}.replaced-{stamp}-{n}")
    return candidate


def build_site(plan: ImportPlan, progress: Progress | None = None) -> Path | None:
    """Write the folder: the copies and ``site.toml`` into a temporary sibling, renamed to the
    target at the end (an existing non-empty target, when replacing, is first renamed aside).
    Returns where the replaced folder went (None when nothing was replaced). On any error or
    cancel the temporary folder is removed and the target is untouched."""
    target = plan.request.target
    target.parent.mkdir(parents=True, exist_ok=True)
    temp = Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".partial", dir=target.parent))
    temp.chmod(0o777 & ~_umask())  # mkdtemp makes it private; the site folder is not
    total = sum(src.stat().st_size for src, _ in plan.copies)
    done = [0]
    try:
        for src, dest in plan.copies:
            (temp / dest).parent.mkdir(parents=True, exist_ok=True)
            _copy(src, temp / dest, done, total, progress)
        (temp / SITE_FILE).write_text(site_toml(plan), encoding="utf-8")
        if progress is not None:
            progress.update(total, total, "copying the files")
        replaced = None
        if target.is_dir() and any(target.iterdir()):
            replaced = _aside(target)
            target.rename(replaced)
        elif target.is_dir():
            target.rmdir()
        temp.rename(target)
    except BaseException:
        shutil.rmtree(temp, ignore_errors=True)
        raise
    return replaced


#: Every problem of an import (planning and loading), written into the new folder.
IMPORT_PROBLEMS_FILE = "import-problems.csv"


@dataclass(frozen=True)
class ImportOutcome:
    """A built folder: where it is, where a replaced folder went (None: none), the loaded
    site (None when the loader refuses it), every problem the loader found and the file
    in the new folder that lists the plan's and the loader's problems together."""

    folder: Path
    replaced: Path | None
    site: Site | None
    problems: list[LoadProblem]
    problems_file: Path | None = None

    @property
    def usable(self) -> bool:
        return self.site is not None


def run_import(plan: ImportPlan, progress: Progress | None = None) -> ImportOutcome:
    """Build the folder (:func:`build_site`) and load it with the ordinary loader."""
    replaced = build_site(plan, progress)
    if progress is not None:
        progress.update(0, 0, "loading the new site")
    try:
        site = load_site(plan.request.target)
        problems = list(site.problems)
    except SiteLoadError as exc:
        site, problems = None, list(exc.problems)
    listed = Path(plan.request.target) / IMPORT_PROBLEMS_FILE
    write_problem_list(listed, [*plan.warnings, *problems])
    return ImportOutcome(plan.request.target, replaced, site, problems, listed)
