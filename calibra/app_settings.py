"""Settings the desktop application keeps, free of any GUI toolkit.

- Per site: the review settings that matter to an engineer (normalized-residual threshold,
  chi-square confidence level, fewest snapshots a point needs), in ``calibra-settings.json``
  in the site folder, so they travel with the site.
- Per user: the sites opened recently, in ``recent-sites.json`` in the user's configuration
  folder (``$CALIBRA_CONFIG_DIR``, else ``$XDG_CONFIG_HOME/calibra``, else ``~/.config/calibra``).

A settings file that cannot be used raises :class:`SettingsError` naming the file and the key;
nothing in it is silently ignored.
"""

from __future__ import annotations

import json
import math
import os
from dataclasses import dataclass, fields
from pathlib import Path

from calibra.diagnosis.classify import ClassifySettings
from calibra.diagnosis.evidence import EvidenceSettings
from calibra.diagnosis.review import ReviewSettings

SETTINGS_FILE = "calibra-settings.json"
RECENT_FILE = "recent-sites.json"
FORMAT = 1
MAX_RECENT = 8


class SettingsError(ValueError):
    """A settings file that cannot be used (the message names the file and the key)."""


@dataclass
class SiteSettings:
    """The review settings an engineer tunes per site (defaults: the review's own)."""

    normalized_threshold: float = EvidenceSettings.normalized_threshold
    confidence: float = EvidenceSettings.confidence
    min_snapshots: int = ClassifySettings.min_snapshots

    def check(self, where: str = "settings") -> None:
        """Raise :class:`SettingsError` when a value is out of its range."""
        t, c, n = self.normalized_threshold, self.confidence, self.min_snapshots
        if not (isinstance(t, int | float) and math.isfinite(t) and t > 0):
            raise SettingsError(f"{where}: normalized_threshold must be a number above 0, "
                                f"not {t!r}")
        if not (isinstance(c, int | float) and 0.5 <= c < 1):
            raise SettingsError(f"{where}: confidence must be at least 0.5 and below 1, "
                                f"not {c!r}")
        if isinstance(n, bool) or not isinstance(n, int) or n < 1:
            raise SettingsError(f"{where}: min_snapshots must be a whole number of at least 1, "
                                f"not {n!r}")

    def review_settings(self) -> ReviewSettings:
        """Full review settings: these values over the review's defaults."""
        st = ReviewSettings()
        st.evidence.normalized_threshold = float(self.normalized_threshold)
        st.evidence.confidence = float(self.confidence)
        st.classify.min_snapshots = int(self.min_snapshots)
        return st


def settings_path(site_folder: str | Path) -> Path:
    """Where a site's settings live."""
    return Path(site_folder) / SETTINGS_FILE


def load_site_settings(site_folder: str | Path) -> SiteSettings:
    """The site's settings; the defaults when the site has no settings file yet."""
    path = settings_path(site_folder)
    if not path.exists():
        return SiteSettings()
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError) as exc:
        raise SettingsError(f"{path}: cannot read the file ({exc})") from exc
    except json.JSONDecodeError as exc:
        raise SettingsError(f"{path}: not valid JSON (line {exc.lineno}, column {exc.colno}: "
                            f"{exc.msg})") from exc
    if not isinstance(data, dict):
        raise SettingsError(f"{path}: expected a JSON object at the top level")
    unknown = sorted(set(data) - {"format", "review"})
    if unknown:
        raise SettingsError(f"{path}: unknown key(s) {', '.join(unknown)}")
    if data.get("format", FORMAT) != FORMAT:
        raise SettingsError(f"{path}: key 'format' is {data.get('format')!r}; this version "
                            f"reads format {FORMAT}")
    review = data.get("review", {})
    if not isinstance(review, dict):
        raise SettingsError(f"{path}: key 'review' must be an object")
    names = {f.name for f in fields(SiteSettings)}
    unknown = sorted(set(review) - names)
    if unknown:
        raise SettingsError(f"{path}: unknown key(s) in 'review': {', '.join(unknown)}")
    settings = SiteSettings(**review)
    settings.check(f"{path}: 'review'")
    return settings


def save_site_settings(site_folder: str | Path, settings: SiteSettings) -> Path:
    """Write the site's settings (checked first); returns the file written."""
    path = settings_path(site_folder)
    settings.check(str(path))
    payload = {"format": FORMAT, "review": {f.name: getattr(settings, f.name)
                                            for f in fields(SiteSettings)}}
    _write_json(path, payload)
    return path


def config_dir() -> Path:
    """The user's calibra configuration folder (not created here)."""
    explicit = os.environ.get("CALIBRA_CONFIG_DIR")
    if explicit:
        return Path(explicit)
    base = os.environ.get("XDG_CONFIG_HOME")
    return (Path(base) if base else Path.home() / ".config") / "calibra"


class RecentSites:
    """The site folders opened most recently, newest first."""

    def __init__(self, path: str | Path | None = None):
        self.path = Path(path) if path is not None else config_dir() / RECENT_FILE

    def folders(self) -> list[Path]:
        """Recent site folders that still exist, newest first (an unreadable list is empty)."""
        try:
            data = json.loads(self.path.read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, json.JSONDecodeError):
            return []
        items = data.get("sites", []) if isinstance(data, dict) else []
        return [Path(p) for p in items if isinstance(p, str) and Path(p).is_dir()]

    def add(self, folder: str | Path) -> list[Path]:
        """Put ``folder`` first; returns the new list."""
        folder = Path(folder).resolve()
        items = [folder] + [p for p in self.folders() if p.resolve() != folder]
        items = items[:MAX_RECENT]
        _write_json(self.path, {"sites": [str(p) for p in items]})
        return items

    def last(self) -> Path | None:
        """The site opened last, if it still exists."""
        items = self.folders()
        return items[0] if items else None


def _write_json(path: Path, payload: dict) -> None:
    """Write through a temporary file so a crash never leaves half a file."""
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(json.dumps(payload, indent=2) + "\n", encoding="utf-8")
    os.replace(tmp, path)
