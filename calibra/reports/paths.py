"""File names made from substation names, which must stay inside the output folder.

A substation name is user data: it may hold ``/``, ``..``, a drive letter, characters that
Windows refuses (``<>:"/\\|?*``), control characters or a reserved device name (``CON``,
``NUL``, ``COM1``…). Names are reduced to letters, digits, space, ``-``, ``_`` and ``.``
(not leading), so the result is one plain file name on every common file system.
"""

from __future__ import annotations

import re
import unicodedata
from collections.abc import Iterable
from pathlib import Path

_WINDOWS_RESERVED = {"CON", "PRN", "AUX", "NUL", *(f"COM{i}" for i in range(10)),
                     *(f"LPT{i}" for i in range(10))}
MAX_STEM = 80


def safe_file_stem(name: str, fallback: str = "substation") -> str:
    """A file-name stem from ``name`` that names no folder and no device."""
    text = unicodedata.normalize("NFKC", str(name))
    kept = "".join(ch if ch.isalnum() or ch in " -_." else "_" for ch in text)
    kept = re.sub(r"_+", "_", kept)
    kept = re.sub(r"\s+", " ", kept).strip(" ._")
    kept = kept[:MAX_STEM].rstrip(" .")
    if not kept:
        return fallback
    if kept.split(".")[0].upper() in _WINDOWS_RESERVED:
        kept = "_" + kept
    return kept


def unique_file_names(names: Iterable[str], suffix: str) -> dict[str, str]:
    """A distinct safe file name per name (``-2``, ``-3``… when two names reduce alike;
    compared without case, as Windows and macOS do)."""
    taken: set[str] = set()
    out: dict[str, str] = {}
    for name in names:
        if name in out:
            continue
        stem = safe_file_stem(name)
        candidate, n = stem + suffix, 1
        while candidate.lower() in taken:
            n += 1
            candidate = f"{stem}-{n}{suffix}"
        taken.add(candidate.lower())
        out[name] = candidate
    return out


def inside(folder: str | Path, file_name: str) -> Path:
    """``folder / file_name``, refusing any name that would land outside ``folder``."""
    folder = Path(folder).resolve()
    path = (folder / file_name).resolve()
    if path.parent != folder:
        raise ValueError(f"file name {file_name!r} would leave the folder {folder}")
    return path


def write_work_orders_html(pages: dict[str, str], folder: str | Path) -> dict[str, Path]:
    """Write each substation's page to ``<folder>/<safe name>.html``; returns the paths."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    names = unique_file_names(pages, ".html")
    written = {}
    for substation, page in pages.items():
        path = inside(folder, names[substation])
        path.write_text(page, encoding="utf-8")
        written[substation] = path
    return written
