"""The ledger file: settings, versioned schema, migrations with backups, append-only log."""

import sqlite3

import pytest

from calibra.ledger import LEDGER_FILE_NAME, Ledger, LedgerError
from calibra.ledger.schema import MIGRATIONS
from tests.ledger.conftest import WEEK1, finding


def _pragma(path, name):
    with sqlite3.connect(path) as conn:
        return conn.execute(f"PRAGMA {name}").fetchone()[0]


def test_new_file_gets_latest_version_and_settings(tmp_path):
    with Ledger.for_site(tmp_path) as led:
        assert led.path == tmp_path / LEDGER_FILE_NAME
        conn = led._conn
        # SQLite documentation, PRAGMA synchronous: FULL is 2; journal_mode reports "wal" [M]
        assert conn.execute("PRAGMA synchronous").fetchone()[0] == 2
        assert conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
        assert conn.execute("PRAGMA foreign_keys").fetchone()[0] == 1
        assert conn.execute("PRAGMA busy_timeout").fetchone()[0] > 0
    assert _pragma(tmp_path / LEDGER_FILE_NAME, "user_version") == len(MIGRATIONS)
    assert not list(tmp_path.glob("*.bak-v*")), "a brand-new file needs no backup"


def test_empty_v0_file_is_backed_up_then_migrated(tmp_path):
    path = tmp_path / "site.sqlite"
    path.write_bytes(b"")  # an empty file is a valid, empty SQLite database of version 0
    with Ledger(path) as led:
        assert led.findings().empty
    assert _pragma(path, "user_version") == len(MIGRATIONS)
    backup = tmp_path / "site.sqlite.bak-v0"
    assert backup.exists()


def test_older_version_migrates_keeping_data_and_a_backup(tmp_path):
    path = tmp_path / "site.sqlite"
    with Ledger(path) as led:
        led.record_review([finding("MC-L1-P")], *WEEK1, {}, {})
    # a later version adds a column: simulated with a second migration
    v2 = ("ALTER TABLE reviews ADD COLUMN operator TEXT",)
    with Ledger(path, migrations=[*MIGRATIONS, v2]) as led:
        assert list(led.findings().index) == ["MC-L1-P|reversed"]
        assert "operator" in [r[1] for r in led._conn.execute("PRAGMA table_info(reviews)")]
    assert _pragma(path, "user_version") == 2
    with sqlite3.connect(path.with_name("site.sqlite.bak-v1")) as old:
        assert old.execute("PRAGMA user_version").fetchone()[0] == 1
        assert old.execute("SELECT count(*) FROM findings").fetchone()[0] == 1
    # upgrading another v1 file at the same place keeps the first backup and adds a second
    first_backup = path.with_name("site.sqlite.bak-v1").read_bytes()
    for suffix in ("", "-wal", "-shm"):
        path.with_name(path.name + suffix).unlink(missing_ok=True)
    with Ledger(path) as led:
        led.record_review([finding("MC-L2-P"), finding("MC-L3-P")], *WEEK1, {}, {})
    with Ledger(path, migrations=[*MIGRATIONS, v2]):
        pass
    assert path.with_name("site.sqlite.bak-v1").read_bytes() == first_backup
    with sqlite3.connect(path.with_name("site.sqlite.bak-v1-2")) as old:
        assert old.execute("SELECT count(*) FROM findings").fetchone()[0] == 2


def test_newer_file_is_refused(tmp_path):
    path = tmp_path / "site.sqlite"
    Ledger(path).close()
    with sqlite3.connect(path) as conn:
        conn.execute(f"PRAGMA user_version = {len(MIGRATIONS) + 1}")
    with pytest.raises(LedgerError, match="newer calibra"):
        Ledger(path)


def test_foreign_sqlite_file_and_non_database_are_refused(tmp_path):
    other = tmp_path / "other.sqlite"
    with sqlite3.connect(other) as conn:
        conn.execute("CREATE TABLE t (x)")
    with pytest.raises(LedgerError, match="another program"):
        Ledger(other)
    assert _pragma(other, "journal_mode") != "wal", "a foreign file must be left as it was"
    text = tmp_path / "notes.sqlite"
    text.write_text("this is not a database, just some text " * 100)
    with pytest.raises(LedgerError, match="notes.sqlite"):
        Ledger(text)


def test_action_log_refuses_update_and_delete(ledger):
    ledger.record_review([finding("MC-L1-P")], *WEEK1, {}, {})
    with pytest.raises(sqlite3.IntegrityError, match="append-only"):
        ledger._conn.execute("UPDATE actions SET user = 'someone else'")
    with pytest.raises(sqlite3.IntegrityError, match="append-only"):
        ledger._conn.execute("DELETE FROM actions")
    assert len(ledger.history()) == 1
