"""Loading a site folder: ``site.toml``, the network, the point list and ``snapshots/``.

The folder format is documented in ``sample_site/README.md``. Every problem found is a
:class:`~calibra.model.site.LoadProblem` naming the file (relative to the site folder), the
row as a spreadsheet shows it (header = row 1) and the column. All problems are collected
before :func:`load_site` decides: errors make the site unusable and raise
:class:`~calibra.model.site.SiteLoadError`; warnings (something skipped or repaired, with a
count) stay in ``Site.problems``.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from calibra.io.cdf import parse_cdf
from calibra.io.matpower import MATPOWER_SUFFIXES, parse_matpower
from calibra.io.model_corrections_file import read_model_corrections
from calibra.io.network_tables import BRANCHES_FILE, BUSES_FILE, read_branches, read_buses
from calibra.io.point_list import POINTS_FILE, read_points
from calibra.io.point_reporting import report_reporting_disagreements
from calibra.io.problems import ProblemLog
from calibra.io.site_config import (
    NETWORK_TABLE,
    SITE_FILE,
    ZERO_INJECTION_KEYS,
    SiteConfig,
    read_site_config,
)
from calibra.io.snapshot_period import FilePlan
from calibra.io.snapshot_size import MEMORY_LIMIT_ENV
from calibra.io.snapshot_size import memory_limit as default_memory_limit
from calibra.io.snapshots import empty_snapshots, plan_files, read_snapshots, snapshot_times
from calibra.io.text_files import read_text
from calibra.model.model_corrections import apply_model_corrections
from calibra.model.network import Network
from calibra.model.site import Site, SiteLoadError
from calibra.model.times import read_local

NETWORK_DIR = "network"
CDF_SUFFIXES = (".cdf", ".txt")


def load_site(
    path: str | Path,
    *,
    strict: bool = False,
    require_snapshots: bool = True,
    start: pd.Timestamp | str | None = None,
    end: pd.Timestamp | str | None = None,
    memory_limit: int | None = None,
) -> Site:
    """Read and check a site folder.

    Raises :class:`SiteLoadError` with every problem found when any is an error (with
    ``strict``, also when any is a warning). ``require_snapshots=False`` accepts a folder
    without snapshot files (the frame is then empty), e.g. before a simulation fills it.

    ``start``/``end`` (both included; naive times are in the site's timezone) load only the
    snapshots of that period, reading the files in chunks, so a long history can be reviewed
    in parts. A snapshot table larger than ``memory_limit`` bytes (default:
    :func:`calibra.io.snapshot_size.memory_limit`) is refused before it is read, with a
    problem that says how large it would be and what to do (a limit variable that holds no
    size is a problem of the "file" ``CALIBRA_SNAPSHOT_MEMORY_LIMIT``). Raises ValueError when
    ``start``/``end`` is not a time.
    """
    folder = Path(path)
    log = ProblemLog()
    config, network, points, point_rows, limit, corrections = _read_base(folder, memory_limit,
                                                                         log)
    timezone = config.timezone if config is not None else "UTC"
    period = resolve_period(start, end, timezone)
    snapshots = read_snapshots(folder, points, timezone, log, required=require_snapshots,
                               period=period, limit=limit or None,
                               settings=config.snapshots if config is not None else None)
    site = _site(folder, config, network, points, point_rows, snapshots, log, strict)
    site.model_corrections = corrections
    return site


def _read_base(folder: Path, memory_limit: int | None, log: ProblemLog):
    """Configuration, network (the model-correction file applied), point list (with their
    rows), the snapshot memory limit and the model corrections applied."""
    if not folder.is_dir():
        log.error(".", None, None, f"site folder '{folder}' not found")
        raise SiteLoadError(log.items)
    try:
        limit = memory_limit if memory_limit is not None else default_memory_limit()
    except ValueError as exc:  # the environment variable holds no size
        log.error(MEMORY_LIMIT_ENV, None, None, str(exc))
        limit = None
    config = read_site_config(folder, log)
    network, buses, branches = _read_network(folder, config, log)
    corrections = read_model_corrections(folder, network, log) if network is not None else []
    if corrections:
        network = apply_model_corrections(network, corrections)
    points, point_rows = read_points(folder, buses, branches, log,
                                     config.points if config is not None else None)
    return config, network, points, point_rows, limit, tuple(corrections)


def _site(folder: Path, config, network, points, point_rows, snapshots, log: ProblemLog,
          strict: bool = False) -> Site:
    """The Site, or SiteLoadError when anything needed is missing or any problem is an error
    (with ``strict``, any problem at all)."""
    if points is not None and snapshots is not None and len(snapshots.index):
        _report_points_without_data(points, point_rows, snapshots, log)
        report_reporting_disagreements(points, point_rows, snapshots, log)
    unusable = log.has_errors or (strict and log.items)
    if unusable or config is None or network is None or points is None or snapshots is None:
        raise SiteLoadError(log.items)
    return Site(folder, config.name, config.timezone, network, points, snapshots, log.items)


@dataclass
class SiteHistory:
    """A site folder opened once to be read period after period (a long history, day by
    day): the configuration, network and point list are read once and every snapshot file's
    times once; :meth:`load` then reads only the rows of a period. ``base`` is the site
    without snapshots, with the problems found while opening."""

    base: Site
    config: SiteConfig
    point_rows: pd.Series
    plans: list[FilePlan]
    limit: int | None

    def times(self) -> pd.DatetimeIndex:
        """Every snapshot time of the files (UTC, sorted, without repeats)."""
        return snapshot_times(self.base.path, self.base.timezone, self.plans)

    def load(self, start: pd.Timestamp | str | None,
             end: pd.Timestamp | str | None) -> Site:
        """The site with the snapshots from ``start`` to ``end`` (both included; naive times
        in the site's timezone), as :func:`load_site` would read them; problems found while
        opening are in ``base`` only. Raises SiteLoadError, or ValueError for a bad time."""
        base = self.base
        period = resolve_period(start, end, base.timezone)
        if period is None:
            raise ValueError("a period is needed: a start, an end or both")
        log = ProblemLog()
        snapshots = read_snapshots(base.path, base.points, base.timezone, log, required=False,
                                   period=period, limit=self.limit or None, plans=self.plans,
                                   settings=self.config.snapshots)
        site = _site(base.path, self.config, base.network, base.points, self.point_rows,
                     snapshots, log)
        site.model_corrections = base.model_corrections
        return site


def open_history(path: str | Path, *, memory_limit: int | None = None) -> SiteHistory:
    """Open a site folder for reading its snapshots period by period (see SiteHistory).
    Raises SiteLoadError when the configuration, network, point list or a snapshot file's
    times have errors."""
    folder = Path(path)
    log = ProblemLog()
    config, network, points, point_rows, limit, corrections = _read_base(folder, memory_limit,
                                                                         log)
    plans = plan_files(folder, config.timezone if config is not None else "UTC", log)
    empty = empty_snapshots(points.index) if points is not None else None
    base = _site(folder, config, network, points, point_rows, empty, log)
    base.model_corrections = corrections
    return SiteHistory(base, config, point_rows, plans, limit)


def resolve_period(start, end, timezone: str) -> tuple[pd.Timestamp | None, ...] | None:
    """The period as UTC times (naive ones in the site's timezone); None when open."""
    if start is None and end is None:
        return None
    return tuple(None if value is None else read_local(value, timezone, what)
                 for value, what in ((start, "start"), (end, "end")))


# ----------------------------------------------------------------------------- network
Tables = tuple[Network | None, pd.DataFrame | None, pd.DataFrame | None]


def _read_network(folder: Path, config: SiteConfig | None, log: ProblemLog) -> Tables:
    """The network, and the bus and branch tables as far as they could be read (for checking
    the point list even when the network has errors)."""
    directory = folder / NETWORK_DIR
    if not directory.is_dir():
        log.error(NETWORK_DIR, None, None, "folder not found")
        return None, None, None
    files = sorted(
        p for p in directory.iterdir()
        if p.is_file() and p.suffix.lower() in CDF_SUFFIXES + MATPOWER_SUFFIXES
        and not p.name.startswith(".")
    )
    csv_files = [n for n in (BUSES_FILE, BRANCHES_FILE) if (folder / n).is_file()]
    for p in sorted(directory.iterdir()):
        rel = f"{NETWORK_DIR}/{p.name}"
        if not p.name.startswith(".") and p not in files and rel not in csv_files:
            log.warning(rel, None, None, "not a network file; ignored")
    if files and csv_files:
        log.error(
            NETWORK_DIR, None, None,
            f"has both buses.csv/branches.csv and a {_format_of(files[0])} file "
            f"({files[0].name}); keep one description of the network",
        )
        return None, None, None
    if len(files) > 1:
        kinds = sorted({_format_of(p) for p in files})
        what = (f"several {kinds[0]} files" if len(kinds) == 1
                else "both " + " and ".join(f"a {k} file" for k in kinds))
        log.error(
            NETWORK_DIR, None, None,
            f"has {what} (" + ", ".join(p.name for p in files) + "); keep one",
        )
        return None, None, None
    if files:
        network = _network_from_file(files[0], config, log)
        if network is None:
            return None, None, None
        return network, network.buses, network.branches
    if config is not None and (config.zero_injection or config.not_zero_injection):
        log.warning(
            SITE_FILE, next(n for n in config.zero_injection_lines if n), NETWORK_TABLE,
            "zero_injection/not_zero_injection override a network read from a CDF or "
            "MATPOWER file; with buses.csv set its zero_injection column instead; ignored",
        )
    buses = read_buses(folder, log)
    branches = read_branches(folder, buses.index if buses is not None else None, log)
    if config is not None and config.base_mva is None:
        log.error(SITE_FILE, None, "base_mva", "required key is missing from [site]")
    reference = None
    if buses is not None and buses.empty:
        log.error(BUSES_FILE, None, "bus", "no row has a bus id; the network has no bus")
        buses = None
    if config is not None and buses is not None:
        reference = config.reference_bus or str(buses.index[0])
        if reference not in buses.index:
            log.error(SITE_FILE, None, "reference_bus", f"unknown bus '{reference}'")
    if config is None or buses is None or branches is None or log.has_errors:
        return None, buses, branches
    network = Network(
        config.name, config.base_mva, buses, branches, reference, config.frequency_hz
    )
    return network, buses, branches


def _format_of(path: Path) -> str:
    return "MATPOWER case" if path.suffix.lower() in MATPOWER_SUFFIXES else "Common Data Format"


def _network_from_file(path: Path, config: SiteConfig | None,
                       log: ProblemLog) -> Network | None:
    """The network of a CDF or MATPOWER file, checked against and completed by site.toml."""
    rel = f"{NETWORK_DIR}/{path.name}"
    text = read_text(path, rel, log)
    if text is None:
        return None
    freq = config.frequency_hz if config is not None else 60.0
    parse = parse_matpower if path.suffix.lower() in MATPOWER_SUFFIXES else parse_cdf
    case = parse(text, rel, log, frequency_hz=freq)
    if case is None or config is None:
        return None
    network = case.network
    if config.base_mva is not None and config.base_mva != case.base_mva:
        log.error(
            SITE_FILE, None, "base_mva",
            f"{config.base_mva:g} MVA differs from the {case.base_mva:g} MVA base of {rel}",
        )
        return None
    if config.reference_bus is not None:
        if config.reference_bus not in network.buses.index:
            log.error(SITE_FILE, None, "reference_bus", f"unknown bus '{config.reference_bus}'")
            return None
        network.reference_bus = config.reference_bus
    if not _override_zero_injection(network, config, _injecting(case), rel, log):
        return None
    network.name = config.name
    return network


def _injecting(case) -> set[str]:
    """Buses a CDF or MATPOWER case gives load or generation in service."""
    data = case.bus_data
    columns = [c for c in ("load_mw", "load_mvar", "gen_mw", "gen_mvar") if c in data]
    buses = set(data.index[data[columns].ne(0).any(axis=1)])
    generators = getattr(case, "generators", None)
    if generators is not None:
        buses |= set(generators["bus"][generators["in_service"]])
    return buses


def _override_zero_injection(network: Network, config: SiteConfig, injecting: set[str],
                             rel: str, log: ProblemLog) -> bool:
    """Apply ``[network] zero_injection``/``not_zero_injection``; False on an unknown bus.
    ``injecting``: buses the file gives load or generation (warned when declared zero)."""
    flags = network.buses["zero_injection"].copy()
    ok = True
    for key, buses, value, line in zip(
        ZERO_INJECTION_KEYS, (config.zero_injection, config.not_zero_injection),
        (True, False), config.zero_injection_lines, strict=True,
    ):
        unknown = [b for b in buses if b not in flags.index]
        if unknown:
            log.error(SITE_FILE, line, key,
                      "unknown bus " + ", ".join(f"'{b}'" for b in unknown) + f" (not in {rel})")
            ok = False
            continue
        same = [b for b in buses if bool(flags[b]) == value]
        if same:
            log.warning(SITE_FILE, line, key,
                        "bus " + ", ".join(same) + f" is {'already' if value else 'not'} "
                        f"zero-injection by {rel}; nothing to override")
        loaded = [b for b in buses if value and b in injecting]
        if loaded:
            log.warning(SITE_FILE, line, key,
                        "bus " + ", ".join(loaded) + f" has load or generation in {rel}; "
                        "it is held at zero injection as listed here")
        flags.loc[list(buses)] = value
    network.buses["zero_injection"] = flags.astype(bool)
    return ok


# ----------------------------------------------------------------------------- points
def _report_points_without_data(
    points: pd.DataFrame, rows: pd.Series, snapshots: pd.DataFrame, log: ProblemLog
) -> None:
    present = snapshots.notna().any(axis=0)
    for tag in points.index[~present.reindex(points.index, fill_value=False).to_numpy()]:
        log.warning(
            rows.attrs.get("file", POINTS_FILE), int(rows.get(tag, 0)) or None,
            rows.attrs.get("tag_column", "tag"),
            f"point '{tag}' has no values in the snapshot files",
        )
