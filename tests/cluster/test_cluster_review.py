"""A review through a two-worker cluster on 127.0.0.1 equals the single-machine review.

Reference: the same window reviewed on this machine (the issue's acceptance: findings,
factors and onsets identical), and the simulator's ground truth in sample_site/truth/faults.csv
for the faults that fall in the window.
"""

from __future__ import annotations

import pandas as pd
import pytest

pytest.importorskip("distributed")

from calibra.cli import main  # noqa: E402
from calibra.cluster import ClusterEngine  # noqa: E402
from calibra.diagnosis.review import ReviewSettings  # noqa: E402
from calibra.ledger import Ledger  # noqa: E402
from calibra.review_run import (  # noqa: E402
    FINDINGS_FILE,
    run_review,
    settings_dict,
)
from tests.cluster.conftest import END, SAMPLE, START  # noqa: E402

KEY_COLUMNS = ["tag", "finding", "factor", "offset", "drift_per_day", "onset"]


@pytest.fixture(scope="module")
def cluster_review(client, sample_site):
    engine = ClusterEngine(client)
    run = run_review(sample_site, start=START, end=END, engine=engine)
    return run, engine


def test_findings_identical_to_the_local_review(cluster_review, local_review):
    run, engine = cluster_review
    # Both workers took part: three UTC days per estimate, many estimates per review.
    assert len(engine.workers_used) == 2
    pd.testing.assert_frame_equal(run.findings[KEY_COLUMNS], local_review.findings[KEY_COLUMNS],
                                  check_exact=True)
    pd.testing.assert_frame_equal(run.findings, local_review.findings, check_exact=True)
    assert run.result.summary == local_review.result.summary


def test_window_faults_found_with_their_onsets(cluster_review):
    """The drift and the frozen value that start inside the window, against the simulator's
    truth table (onsets within 6 h: the acceptance of the sample-site review)."""
    run, _ = cluster_review
    truth = pd.read_csv(SAMPLE / "truth" / "faults.csv")
    truth["onset"] = pd.to_datetime(truth["onset"], utc=True)
    inside = truth[(truth["onset"] > START) & (truth["onset"] < END)]
    assert set(inside["kind"]) == {"drift", "stuck"}
    found = run.findings.set_index("tag")
    for r in inside.itertuples():
        assert found.at[r.tag, "finding"] == r.kind
        assert abs(found.at[r.tag, "onset"] - r.onset) < pd.Timedelta("6h")


def test_command_line_local_cluster_with_ledger(local_review, tmp_path, capsys):
    """``calibra review --cluster local:2`` with a ledger holding a software correction: the
    correction reaches the workers, so the corrected point (NRC.110.T1H.MVAR, wired reversed:
    truth fault 2) is no longer found — it stays listed as corrected in software, the field
    fix still due — and everything else is found as by the local review. (That corrected
    estimates equal the local ones to the bit: test_cluster_engine.)"""
    tag = "NRC.110.T1H.MVAR"
    ledger_file = tmp_path / "ledger.sqlite"
    with Ledger(ledger_file) as ledger:
        result = local_review.result
        ledger.record_review(result.findings, result.period_start, result.period_end,
                             settings_dict(ReviewSettings()), {})
        ledger.mark_reversed(tag, user="test")
    out = tmp_path / "cluster"
    code = main(["review", str(SAMPLE), "--cluster", "local:2", "--ledger", str(ledger_file),
                 "--no-pdf", "--from", START.isoformat(), "--to", END.isoformat(),
                 "--out", str(out)])
    printed = capsys.readouterr().out
    assert code == 0, printed
    assert f"software corrections applied: 1 ({tag})" in printed
    found = pd.read_csv(out / FINDINGS_FILE)
    seen = found[found["in_this_review"]]
    assert tag not in set(seen["tag"])
    assert set(seen["tag"]) == set(local_review.findings["tag"]) - {tag}
    kept = found.set_index("tag").loc[tag]
    assert kept["state"] == "corrected" and "field fix is still due" in kept["evidence"]
    with Ledger(ledger_file) as ledger:
        assert ledger.findings().at[f"{tag}|reversed", "state"] == "corrected"


@pytest.mark.parametrize("argv, message", [
    (["--cluster", "local:0"], "--cluster: local:N needs 1 to 256"),
    (["--cluster", "nowhere"], "--cluster: not a cluster address"),
    (["--worker-site", "/data/site"], "--worker-site needs --cluster"),
])
def test_command_line_usage_errors(argv, message, tmp_path, capsys):
    code = main(["review", str(SAMPLE), "--out", str(tmp_path), *argv])
    assert code == 2
    assert message in capsys.readouterr().err
