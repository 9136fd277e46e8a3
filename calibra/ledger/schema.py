"""Ledger file: connection settings, schema and migrations.

The schema version is ``PRAGMA user_version``: version N means the first N entries of
:data:`MIGRATIONS` have been applied. Opening an older file first copies it to
``<file>.bak-v<N>`` and then applies the missing migrations, each in one transaction.
"""

from __future__ import annotations

import sqlite3
from collections.abc import Sequence
from pathlib import Path

from calibra.ledger.states import STATES

#: Marks a SQLite file as a calibra ledger (``PRAGMA application_id``; "CLBR" in ASCII).
APPLICATION_ID = 0x434C4252
LEDGER_FILE_NAME = "calibra-ledger.sqlite"
BUSY_TIMEOUT_MS = 10_000

_STATES_SQL = ", ".join(f"'{state}'" for state in STATES)

V1: tuple[str, ...] = (
    f"PRAGMA application_id = {APPLICATION_ID}",
    """CREATE TABLE reviews (
        id INTEGER PRIMARY KEY AUTOINCREMENT,
        started_at TEXT NOT NULL,
        finished_at TEXT NOT NULL,
        period_start TEXT NOT NULL,
        period_end TEXT NOT NULL,
        settings TEXT NOT NULL,
        summary TEXT NOT NULL,
        software_version TEXT NOT NULL
    )""",
    f"""CREATE TABLE findings (
        finding_id TEXT PRIMARY KEY,
        tag TEXT NOT NULL,
        kind TEXT NOT NULL,
        device TEXT NOT NULL,
        substation TEXT NOT NULL,
        factor REAL,
        "offset" REAL,
        drift_per_day REAL,
        onset TEXT,
        confidence REAL,
        evidence TEXT NOT NULL,
        extra TEXT NOT NULL,
        first_seen_review INTEGER NOT NULL REFERENCES reviews(id),
        last_seen_review INTEGER NOT NULL REFERENCES reviews(id),
        state TEXT NOT NULL CHECK (state IN ({_STATES_SQL}))
    )""",
    "CREATE INDEX findings_by_tag ON findings(tag)",
    """CREATE TABLE actions (
        id INTEGER PRIMARY KEY AUTOINCREMENT,
        at TEXT NOT NULL,
        user TEXT NOT NULL,
        tag TEXT NOT NULL,
        finding_id TEXT REFERENCES findings(finding_id),
        kind TEXT NOT NULL,
        payload TEXT NOT NULL,
        undoes INTEGER REFERENCES actions(id)
    )""",
    "CREATE INDEX actions_by_tag ON actions(tag)",
    """CREATE TRIGGER actions_no_update BEFORE UPDATE ON actions
       BEGIN SELECT RAISE(ABORT, 'the action log is append-only'); END""",
    """CREATE TRIGGER actions_no_delete BEFORE DELETE ON actions
       BEGIN SELECT RAISE(ABORT, 'the action log is append-only'); END""",
    """CREATE TABLE corrections (
        id INTEGER PRIMARY KEY AUTOINCREMENT,
        tag TEXT NOT NULL,
        kind TEXT NOT NULL,
        gain REAL NOT NULL,
        bias REAL NOT NULL,
        valid_from TEXT,
        valid_until TEXT,
        source_action INTEGER NOT NULL UNIQUE REFERENCES actions(id)
    )""",
    "CREATE INDEX corrections_by_tag ON corrections(tag)",
)

#: Migration N+1 takes a file from version N to N+1.
MIGRATIONS: list[Sequence[str]] = [V1]


class LedgerError(Exception):
    """A ledger operation that cannot be done, with the reason."""


def open_file(path: Path, migrations: Sequence[Sequence[str]] | None = None) -> sqlite3.Connection:
    """Open (creating or migrating as needed) a ledger file with the ledger's settings.

    Settings: foreign keys on, a busy timeout for concurrent writers, WAL journal with
    synchronous=FULL so a committed transaction survives a crash. Transactions are explicit.
    """
    existed = path.exists()
    try:
        conn = sqlite3.connect(path, isolation_level=None, timeout=BUSY_TIMEOUT_MS / 1000)
    except sqlite3.Error as exc:
        raise LedgerError(f"{path}: cannot open ({exc})") from exc
    try:
        conn.execute(f"PRAGMA busy_timeout = {BUSY_TIMEOUT_MS}")
        conn.execute("PRAGMA foreign_keys = ON")
        migrate(conn, path, existed, migrations)
        conn.execute("PRAGMA journal_mode = WAL")
        conn.execute("PRAGMA synchronous = FULL")
    except BaseException:
        conn.close()
        raise
    return conn


def user_version(conn: sqlite3.Connection) -> int:
    return int(conn.execute("PRAGMA user_version").fetchone()[0])


def migrate(
    conn: sqlite3.Connection, path: Path, existed: bool,
    migrations: Sequence[Sequence[str]] | None = None,
) -> int:
    """Bring the file to the latest version; returns the version it had.

    An existing file is copied to ``<path>.bak-v<N>`` before its first migration. A file of
    another program (tables but version 0, or a foreign application id) is refused.
    """
    migrations = MIGRATIONS if migrations is None else migrations
    target = len(migrations)
    found = _check_ours(conn, path, target)
    if found == target:
        return found
    if existed:
        backup(conn, path, found)
    for number in range(found, target):
        conn.execute("BEGIN IMMEDIATE")
        try:
            if user_version(conn) == number:  # another process may have migrated meanwhile
                for statement in migrations[number]:
                    conn.execute(statement)
                conn.execute(f"PRAGMA user_version = {number + 1}")
            conn.execute("COMMIT")
        except BaseException:
            conn.execute("ROLLBACK")
            raise
    return found


def _check_ours(conn: sqlite3.Connection, path: Path, target: int) -> int:
    try:
        version = user_version(conn)
        app_id = int(conn.execute("PRAGMA application_id").fetchone()[0])
        tables = conn.execute("SELECT count(*) FROM sqlite_master").fetchone()[0]
    except sqlite3.DatabaseError as exc:
        raise LedgerError(f"{path}: not a ledger file ({exc})") from exc
    if version == 0 and tables:
        raise LedgerError(f"{path}: a SQLite file of another program (tables but no version)")
    if version > 0 and app_id != APPLICATION_ID:
        raise LedgerError(f"{path}: a SQLite file of another program (application id {app_id})")
    if version > target:
        raise LedgerError(
            f"{path}: ledger version {version} was written by a newer calibra "
            f"(this one knows up to version {target})")
    return version


def backup(conn: sqlite3.Connection, path: Path, version: int) -> Path:
    """Copy the whole database to ``<path>.bak-v<version>`` (never overwriting a backup)."""
    target = path.with_name(f"{path.name}.bak-v{version}")
    n = 1
    while target.exists():
        n += 1
        target = path.with_name(f"{path.name}.bak-v{version}-{n}")
    copy = sqlite3.connect(target)
    try:
        conn.backup(copy)
    finally:
        copy.close()
    return target
