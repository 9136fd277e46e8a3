"""Reading ``site.toml``: the site's name, system base, frequency, timezone and reference bus,
and the optional ``[network]`` table that overrides the zero-injection buses a CDF or
MATPOWER network file implies (``zero_injection = ["7"]``, ``not_zero_injection = ["9"]``)."""

from __future__ import annotations

import re
import tomllib
import zoneinfo
from dataclasses import dataclass, field
from pathlib import Path

from calibra.io.points_config import POINTS_TABLE, PointsConfig, read_points_config
from calibra.io.problems import ProblemLog
from calibra.io.snapshot_settings import SnapshotSettings, read_snapshot_settings
from calibra.io.text_files import read_text

SITE_FILE = "site.toml"
_KEYS = ("name", "base_mva", "frequency_hz", "timezone", "reference_bus")
NETWORK_TABLE = "network"
ZERO_INJECTION_KEYS = ("zero_injection", "not_zero_injection")


@dataclass(frozen=True)
class SiteConfig:
    """The ``[site]`` table; ``base_mva`` may be None when a CDF or MATPOWER network supplies
    it. ``zero_injection``/``not_zero_injection``: bus ids from ``[network]`` with their
    ``site.toml`` line (None when not given). ``points``: the ``[points]`` table (sheet and
    column mapping of the point list)."""

    name: str
    base_mva: float | None
    frequency_hz: float
    timezone: str
    reference_bus: str | None
    zero_injection: tuple[str, ...] = ()
    not_zero_injection: tuple[str, ...] = ()
    zero_injection_lines: tuple[int | None, int | None] = (None, None)
    points: PointsConfig = field(default_factory=PointsConfig)
    snapshots: SnapshotSettings = SnapshotSettings()  # [snapshots]


def _line_of(text: str, key: str) -> int | None:
    name = re.escape(key)
    match = re.search(rf"^\s*(?:{name}\s*=|\[+\s*{name}\s*\])", text, re.MULTILINE)
    return text.count("\n", 0, match.start()) + 1 if match else None


def check_timezone(name: str) -> str | None:
    """None when ``name`` is a known IANA timezone, else why not."""
    try:
        zoneinfo.ZoneInfo(name)
    except (zoneinfo.ZoneInfoNotFoundError, ValueError, TypeError):
        return f"'{name}' is not an IANA timezone name such as Europe/Berlin or America/Chicago"
    return None


def read_site_config(folder: Path, log: ProblemLog) -> SiteConfig | None:
    """Read and check ``site.toml``; None when it is missing or unusable (errors logged)."""
    path = folder / SITE_FILE
    if not path.is_file():
        log.error(SITE_FILE, None, None, "file not found")
        return None
    text = read_text(path, SITE_FILE, log)
    if text is None:
        return None
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        found = re.search(r"line (\d+)", str(exc))
        log.error(SITE_FILE, int(found.group(1)) if found else None, None, f"not valid TOML: {exc}")
        return None
    for key in doc:
        if key not in ("site", NETWORK_TABLE, POINTS_TABLE, "snapshots"):
            log.warning(SITE_FILE, _line_of(text, key), key, "unknown entry; ignored")
    site = doc.get("site")
    if not isinstance(site, dict):
        log.error(SITE_FILE, None, None, "the [site] table is missing")
        return None
    for key in site:
        if key not in _KEYS:
            log.warning(SITE_FILE, _line_of(text, key), key, "unknown key in [site]; ignored")
    start = log.error_count()

    def value(key: str, kind: str, required: bool = True):
        if key not in site:
            if required:
                log.error(SITE_FILE, None, key, "required key is missing from [site]")
            return None
        v = site[key]
        row = _line_of(text, key)
        if kind == "text":
            if isinstance(v, int) and not isinstance(v, bool):
                v = str(v)
            if not isinstance(v, str) or not v.strip():
                log.error(SITE_FILE, row, key, f"must be a non-empty text, not {v!r}")
                return None
            return v.strip()
        if isinstance(v, bool) or not isinstance(v, int | float) or not 0 < v < float("inf"):
            log.error(SITE_FILE, row, key, f"must be a number greater than zero, not {v!r}")
            return None
        return float(v)

    name = value("name", "text")
    base = value("base_mva", "number", required=False)
    freq = value("frequency_hz", "number")
    tz = value("timezone", "text")
    ref = value("reference_bus", "text", required=False)
    if tz is not None and (why := check_timezone(tz)):
        log.error(SITE_FILE, _line_of(text, "timezone"), "timezone", why)
    lists = _zero_injection_lists(doc.get(NETWORK_TABLE), text, log)
    snapshots = read_snapshot_settings(doc.get("snapshots", {}), SITE_FILE,
                                       lambda key: _line_of(text, key), log)
    if log.error_count() > start:
        return None
    lines = tuple(_line_of(text, key) for key in ZERO_INJECTION_KEYS)
    return SiteConfig(name, base, freq, tz, ref, lists[0], lists[1], lines,
                      read_points_config(doc, text, SITE_FILE, log), snapshots)


def _zero_injection_lists(table, text: str, log: ProblemLog) -> tuple[tuple[str, ...], ...]:
    """The bus ids of ``[network] zero_injection`` and ``not_zero_injection`` (errors
    logged for anything that is not a list of bus ids, or a bus in both)."""
    if table is None:
        return (), ()
    if not isinstance(table, dict):
        log.error(SITE_FILE, _line_of(text, NETWORK_TABLE), NETWORK_TABLE,
                  "must be a table: [network] with zero_injection = [...] and/or "
                  "not_zero_injection = [...]")
        return (), ()
    for key in table:
        if key not in ZERO_INJECTION_KEYS:
            log.warning(SITE_FILE, _line_of(text, key), key,
                        "unknown key in [network]; ignored")
    lists = []
    for key in ZERO_INJECTION_KEYS:
        value = table.get(key, [])
        ok = isinstance(value, list) and all(
            isinstance(v, str) and v.strip() or isinstance(v, int) and not isinstance(v, bool)
            for v in value)
        if not ok:
            log.error(SITE_FILE, _line_of(text, key), key,
                      f"must be a list of bus ids such as [\"7\", \"12\"], not {value!r}")
            lists.append(())
            continue
        lists.append(tuple(str(v).strip() for v in value))
    both = sorted(set(lists[0]) & set(lists[1]))
    if both:
        log.error(SITE_FILE, _line_of(text, ZERO_INJECTION_KEYS[1]), ZERO_INJECTION_KEYS[1],
                  "bus " + ", ".join(both) + " is also listed in zero_injection; list each "
                  "bus in one of the two")
    return lists[0], lists[1]
