"""Crash safety: writers killed with SIGKILL at random moments lose nothing they committed.

SQLite in WAL mode with synchronous=FULL makes each transaction atomic and durable (SQLite
documentation, "Atomic Commit In SQLite" and "Write-Ahead Logging") [M]. Each run forks two
writers on the same ledger; they append actions in a loop and report each action id on a pipe
after its commit; both are killed at random moments. Afterwards the file must pass
``PRAGMA integrity_check``, hold every reported id, and its cache must agree with its log.

Stress run with more kills: ``CALIBRA_LEDGER_CRASH_RUNS=1000 pytest tests/ledger/test_crash.py``.
"""

import multiprocessing
import os
import random
import signal
import time

import pytest

from calibra.ledger import Ledger, LedgerError
from tests.ledger.conftest import WEEK1, WEEK2, finding

RUNS = int(os.environ.get("CALIBRA_LEDGER_CRASH_RUNS", "30"))
TAGS = ["MC-L1-P", "MC-L1-Q", "MC-L2-P"]

pytestmark = pytest.mark.skipif(not hasattr(os, "fork"), reason="needs fork() and SIGKILL")


def _writer(path, pipe_fd: int, seed: int) -> None:
    """Append actions forever, writing each committed action id to the pipe."""
    rng = random.Random(seed)
    with Ledger(path) as led:
        while True:
            tag = rng.choice(TAGS)
            fid = f"{tag}|reversed"
            try:
                what = rng.randrange(6)
                if what == 0:
                    led.record_review([finding(t) for t in TAGS], *WEEK2, {"seed": seed}, {})
                    continue  # a review id, not an action id
                if what == 1:
                    action_id = led.mark_reversed(tag, user=f"w{seed}")
                elif what == 2:
                    action_id = led.undo(rng.choice([tag, fid]), user=f"w{seed}")
                elif what == 3:
                    action_id = led.dismiss(fid, "crash test", user=f"w{seed}")
                elif what == 4:
                    action_id = led.confirm(fid, user=f"w{seed}")
                else:
                    action_id = led.add_note(fid, f"note {seed}", user=f"w{seed}")
            except LedgerError:
                continue
            os.write(pipe_fd, f"{action_id}\n".encode())


def _run_and_kill(ctx, path, seed: int, rng: random.Random) -> list[int]:
    """Two writers, each killed after a random delay; the ids they reported as committed."""
    started = []
    for k in range(2):
        read_fd, write_fd = os.pipe()
        proc = ctx.Process(target=_writer, args=(path, write_fd, 2 * seed + k), daemon=True)
        proc.start()
        os.close(write_fd)
        started.append((proc, read_fd, time.monotonic() + rng.uniform(0.01, 0.2)))
    ids: list[int] = []
    for proc, read_fd, kill_at in sorted(started, key=lambda s: s[2]):
        time.sleep(max(0.0, kill_at - time.monotonic()))
        os.kill(proc.pid, signal.SIGKILL)
        proc.join()
        with os.fdopen(read_fd, "rb") as pipe:
            text = pipe.read().decode()
        lines = text.split("\n")[:-1]  # a last line without newline was not complete
        ids.extend(int(line) for line in lines)
    return ids


def test_killed_writers_lose_nothing_committed(tmp_path):
    path = tmp_path / "calibra-ledger.sqlite"
    with Ledger(path) as led:
        led.record_review([finding(t) for t in TAGS], *WEEK1, {}, {})
    ctx = multiprocessing.get_context("fork")
    rng = random.Random(20260310)
    reported: list[int] = []
    for run in range(RUNS):
        reported.extend(_run_and_kill(ctx, path, run, rng))
        with Ledger(path) as led:
            assert led.integrity_check() == "ok", f"run {run}"
            present = set(led.history().index)
            missing = sorted(set(reported) - present)
            assert not missing, f"run {run}: committed actions lost: {missing[:10]}"
            assert led.cache_disagreements() == [], f"run {run}"
    assert len(reported) > 2 * RUNS, "the writers should have committed many actions"
