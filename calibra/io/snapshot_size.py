"""How much memory the snapshot table of a site would take, known before it is read.

A loaded site holds its snapshots as one float64 table (rows × points, plus the time index),
and a review keeps several arrays of that size (measured values, estimates, residuals), so
the table must stay a modest share of the machine's memory. The loader therefore estimates
the table from file metadata before reading any value:

- Parquet: the row count in the file footer (exact);
- CSV: the file size divided by the mean length of the first lines (``.csv.gz``: the
  uncompressed size from the gzip trailer);

and refuses a load above the limit with a message that says how large the table would be
and what to do (review a shorter period, split the files, or raise the limit).

The limit (:func:`memory_limit`): the environment variable ``CALIBRA_SNAPSHOT_MEMORY_LIMIT``
(bytes, or a size such as ``6GB``, ``512MiB``; ``0`` means no limit) when set, else
4 GiB or an eighth of the physical memory (or of the container's memory limit), whichever is
less. An eighth leaves room for the review's working arrays (common practice, no source).
While a CSV file is read whole its text is held too (about as large again); a period is read
in chunks (:mod:`calibra.io.snapshot_period`).
"""

from __future__ import annotations

import os
import re
import zlib
from dataclasses import dataclass
from pathlib import Path

import pyarrow.parquet as pq

from calibra.io.problems import ProblemLog

MEMORY_LIMIT_ENV = "CALIBRA_SNAPSHOT_MEMORY_LIMIT"
MAX_DEFAULT_LIMIT = 4 * 2**30
MEMORY_SHARE = 8
SAMPLE_BYTES = 256 * 2**10
MAX_SAMPLE_BYTES = 64 * 2**20
SAMPLE_LINES = 20
DEFLATE_MAX_RATIO = 1032  # deflate expands at most 1032-fold (zlib technical details)
_LINE_END = re.compile(rb"\r\n|\r|\n")
BYTES_PER_VALUE = 8  # float64 values and int64 nanosecond times
_UNITS = {"": 1, "b": 1, "k": 10**3, "kb": 10**3, "kib": 2**10, "m": 10**6, "mb": 10**6,
          "mib": 2**20, "g": 10**9, "gb": 10**9, "gib": 2**30, "t": 10**12, "tb": 10**12,
          "tib": 2**40}


def parse_size(text: str) -> int:
    """Bytes from ``"6GB"``, ``"512 MiB"``, ``"1e9"``…; ValueError when it is not a size."""
    match = re.fullmatch(r"\s*([0-9]*\.?[0-9]+(?:[eE][+-]?\d+)?)\s*([A-Za-z]*)\s*", text)
    if not match or match.group(2).lower() not in _UNITS:
        raise ValueError(f"{text!r} is not a size such as 6GB or 512MiB")
    return int(float(match.group(1)) * _UNITS[match.group(2).lower()])


def physical_memory() -> int | None:
    """Physical memory in bytes, or the container's limit when that is smaller."""
    try:
        total = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    except (ValueError, OSError, AttributeError):
        total = None
    try:
        text = Path("/sys/fs/cgroup/memory.max").read_text().strip()
        if text.isdigit():
            total = min(total or int(text), int(text))
    except OSError:
        pass
    return total if total and total > 0 else None


def memory_limit() -> int | None:
    """The snapshot table size above which a load is refused (None: no limit).

    Raises ValueError when the environment variable does not hold a size."""
    configured = os.environ.get(MEMORY_LIMIT_ENV)
    if configured is not None and configured.strip():
        size = parse_size(configured)
        return size or None
    physical = physical_memory()
    return MAX_DEFAULT_LIMIT if physical is None else min(MAX_DEFAULT_LIMIT,
                                                          physical // MEMORY_SHARE)


def format_bytes(n: float) -> str:
    """``n`` bytes for people: 512 MB, 3.2 GB, 21 GB."""
    for unit, size in (("TB", 10**12), ("GB", 10**9), ("MB", 10**6), ("kB", 10**3)):
        if n >= size:
            value = n / size
            return f"{value:.1f} {unit}" if value < 10 else f"{value:.0f} {unit}"
    return f"{int(n)} bytes"


@dataclass(frozen=True)
class FileRows:
    """The rows of one snapshot file as known before reading it."""

    rel: str
    rows: int
    exact: bool


def _gzip_size(path: Path) -> int:
    """The uncompressed size of a gzip file: the trailer gives it modulo 2³² (RFC 1952,
    ISIZE); the expansion of the first bytes tells which multiple of 2³² to add."""
    compressed = path.stat().st_size
    with path.open("rb") as handle:
        handle.seek(max(compressed - 4, 0))
        isize = int.from_bytes(handle.read(4), "little")
    rough = compressed * _gzip_expansion(path)
    if isize > compressed * DEFLATE_MAX_RATIO:  # not a trailer: a damaged or cut file
        return int(rough)
    return isize + max(round((rough - isize) / 2**32), 0) * 2**32


def _gzip_expansion(path: Path) -> float:
    """Uncompressed bytes per compressed byte over the start of a gzip file."""
    inflater = zlib.decompressobj(wbits=31)
    used = produced = 0
    with path.open("rb") as handle:
        while produced < SAMPLE_BYTES:
            chunk = handle.read(64 * 2**10)
            if not chunk:
                break
            produced += len(inflater.decompress(chunk, SAMPLE_BYTES))
            used += len(chunk) - len(inflater.unconsumed_tail) - len(inflater.unused_data)
            if inflater.eof:
                break
    return produced / used if used else 1.0


def _csv_head(path: Path) -> bytes:
    """The first bytes of a CSV file (decompressed): at least ``SAMPLE_BYTES`` and, with a
    header longer than that (thousands of tags), the header and some lines after it."""
    gz = path.name.lower().endswith(".gz")
    inflater = zlib.decompressobj(wbits=31) if gz else None
    head = b""
    with path.open("rb") as handle:
        while len(head) < MAX_SAMPLE_BYTES:
            data = inflater.unconsumed_tail if inflater and inflater.unconsumed_tail else (
                handle.read(SAMPLE_BYTES))
            if not data:
                break
            head += inflater.decompress(data, SAMPLE_BYTES) if inflater else data
            if (inflater and inflater.eof) or (
                    len(head) >= SAMPLE_BYTES and len(_LINE_END.findall(head)) > SAMPLE_LINES):
                break
    return head


def estimate_rows(path: Path, rel: str) -> FileRows | None:
    """The number of data rows of a snapshot file; None when its metadata cannot be read
    (the reader then reports the file)."""
    try:
        if path.name.lower().endswith(".parquet"):
            return FileRows(rel, pq.ParquetFile(path).metadata.num_rows, True)
        size = path.stat().st_size
        if path.name.lower().endswith(".gz"):
            size = _gzip_size(path)
        head = _csv_head(path)
    except (OSError, zlib.error, EOFError):
        return None
    except Exception:  # noqa: BLE001 - pyarrow raises many kinds; the reader reports them
        return None
    if len(head) >= size:  # the whole file is in the sample: count its lines
        return FileRows(rel, max(len(_LINE_END.split(head.rstrip(b"\r\n"))) - 1, 0), True)
    ends = [m.end() for m in _LINE_END.finditer(head)]
    if len(ends) < 2:  # one line in the sample: rows as long as it, at the least
        return FileRows(rel, int(size / max(len(head), 1)), False)
    mean = (ends[-1] - ends[0]) / (len(ends) - 1)
    return FileRows(rel, int((size - ends[0]) / max(mean, 1.0)), False)


def refuse_if_too_large(
    files: list[FileRows], points: int, limit: int | None, log: ProblemLog, *,
    period: str | None = None,
) -> bool:
    """Log an error and return True when ``files`` would make a table above ``limit``."""
    rows = sum(f.rows for f in files)
    need = rows * (points + 1) * BYTES_PER_VALUE
    if limit is None or need <= limit:
        return False
    names = ", ".join(f.rel for f in files[:3]) + (
        f" and {len(files) - 3} more files" if len(files) > 3 else "")
    about = "" if all(f.exact for f in files) else "about "
    share = max(2, -(-need // limit))
    what = f"the period {period}" if period else "the snapshot files"
    log.error(
        "snapshots", None, None,
        f"{what} ({names}) hold {about}{rows:,} rows for {points:,} points: "
        f"{format_bytes(need)} in memory as float64, more than the limit of "
        f"{format_bytes(limit)}. Review a shorter period (calibra review --from/--to, "
        f"about 1/{share} of it at a time) or split the files by period; the limit is set by "
        f"{MEMORY_LIMIT_ENV} (e.g. {MEMORY_LIMIT_ENV}=16GB) on a machine with more memory",
    )
    return True
