"""A `calibra review` killed at random moments (SIGKILL) leaves a ledger that opens, passes
PRAGMA integrity_check, agrees with a replay of its log, and holds every review whose
summary the command printed (common practice for crash safety, no source)."""

from __future__ import annotations

import os
import random
import signal
import subprocess
import sys
import time

import pytest

from calibra.ledger import Ledger
from calibra.simulate.faults import FaultSpec
from calibra.simulate.writer import write_site
from tests.diagnosis.scenarios import generated_scenario


@pytest.fixture(scope="module")
def site_folder(tmp_path_factory):
    clean = generated_scenario("case57", 51, periods=144, faults=False)
    pts = clean.site.points
    tag = pts.index[pts["quantity"] == "p_flow"][3]
    sim = generated_scenario("case57", 51, periods=144,
                             faults=[FaultSpec("reversed", (tag,), factor=-1.0)])
    folder = tmp_path_factory.mktemp("site")
    write_site(sim.site, folder)
    return folder


@pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="needs SIGKILL (POSIX)")
def test_review_killed_at_random_moments(site_folder, tmp_path):
    rng = random.Random(7)
    ledger_path = tmp_path / "ledger.sqlite"
    completed = 0
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    cmd = [sys.executable, "-m", "calibra", "review", str(site_folder), "--out",
           str(tmp_path / "out"), "--ledger", str(ledger_path), "--no-pdf"]
    # One complete run first, to know how long a review takes here.
    t0 = time.perf_counter()
    done = subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=300)
    full = time.perf_counter() - t0
    assert done.returncode == 0, done.stdout + done.stderr
    completed += 1
    for _ in range(3):
        proc = subprocess.Popen(cmd, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                                text=True)
        time.sleep(rng.uniform(0.2, full))
        proc.send_signal(signal.SIGKILL)
        out, _ = proc.communicate(timeout=60)
        if "findings:" in out:  # the summary is printed after the ledger write
            completed += 1
    with Ledger(ledger_path) as ledger:
        assert ledger.integrity_check() == "ok"
        assert ledger.cache_disagreements() == []
        assert len(ledger.reviews()) >= completed
