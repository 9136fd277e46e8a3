"""End to end: review, correct in software through the ledger, review again, repair, verify."""

from __future__ import annotations

import pandas as pd
import pytest

from calibra.ledger import Ledger
from calibra.review_run import FINDINGS_FILE, run_review, write_outputs
from tests.diagnosis.scenarios import reversed_device_scenario


@pytest.fixture(scope="module")
def reversed_site():
    """Two days of five-minute IEEE 57 data (pypower case57) with one reversed device."""
    sim, _, tags = reversed_device_scenario("case57", 21)
    return sim.site, tags


def test_correct_then_repair_then_verify(reversed_site, tmp_path):
    site, tags = reversed_site
    with Ledger(tmp_path / "ledger.sqlite") as ledger:
        first = run_review(site, ledger=ledger)
        found = first.findings.set_index("tag")
        assert set(tags) <= set(found.index)
        assert (found.loc[list(tags), "finding"] == "reversed").all()
        chi2_before = first.result.summary.rounds[0]["chi2_failed"]

        for tag in tags:
            ledger.mark_reversed(tag, user="test")
        second = run_review(site, ledger=ledger)
        # The review no longer sees the fault (its data are corrected), but the CT is still
        # wrong: the findings stay, as corrected in software, for the field work.
        seen = second.findings[second.findings["in_this_review"]]
        assert not set(tags) & set(seen["tag"])
        kept = second.findings.set_index("tag").loc[list(tags)]
        assert (kept["state"] == "corrected").all()
        assert kept["evidence"].str.contains("corrected in software since").all()
        assert kept["evidence"].str.contains("field fix is still due").all()
        # With the correction applied, far fewer snapshots fail with every point in.
        assert second.result.summary.rounds[0]["chi2_failed"] < 0.2 * chi2_before
        states = ledger.findings().set_index("tag")
        assert (states.loc[list(tags), "state"] == "corrected").all()

        # Repaired in the field at mid-period: raw values are used again from then on. The
        # simulated data stay reversed, so the review finds the meter again (the repair did
        # not cure it) only after the repair time; a review of the part before the repair,
        # still corrected, finds nothing.
        mid = site.snapshots.index[len(site.snapshots) // 2]
        for tag in tags:
            ledger.mark_repaired(tag, mid, user="test")
        before = run_review(site, ledger=ledger, end=mid - pd.Timedelta("1min"))
        assert not set(tags) & set(before.findings["tag"])
        after = run_review(site, ledger=ledger, start=mid)
        again = after.findings.set_index("tag").loc[list(tags)]
        assert again["in_this_review"].all() and (again["state"] == "new").all()
        assert again["evidence"].str.contains("did not clear it").all()
        history = ledger.history(tag=tags[0])
        assert len(history) >= 3


def test_repair_is_verified_when_the_field_fix_shows(reversed_site, tmp_path):
    """The crew fixes the polarity at mid-period: raw values are right from then on. With the
    meter marked repaired at that time the next review of the period no longer finds it, and
    the ledger marks the finding verified."""
    site, tags = reversed_site
    mid = site.snapshots.index[len(site.snapshots) // 2]
    fixed = site.snapshots.copy()
    fixed.loc[mid:, list(tags)] *= -1.0
    from dataclasses import replace

    fixed_site = replace(site, snapshots=fixed)
    with Ledger(tmp_path / "ledger.sqlite") as ledger:
        run_review(fixed_site, end=mid - pd.Timedelta("1min"), ledger=ledger)
        for tag in tags:
            ledger.mark_reversed(tag, user="test")
            ledger.mark_repaired(tag, mid, user="test")
        final = run_review(fixed_site, ledger=ledger)
        assert not set(tags) & set(final.findings["tag"])
        states = ledger.findings().set_index("tag")
        assert (states.loc[list(tags), "state"] == "verified").all()


def test_outputs_written(reversed_site, tmp_path):
    site, tags = reversed_site
    run = run_review(site)
    files = write_outputs(run, site, tmp_path / "out")
    table = pd.read_csv(files["findings"], encoding="utf-8-sig")
    assert set(tags) <= set(table["tag"])
    assert (tmp_path / "out" / FINDINGS_FILE).exists()
    assert files["work_orders_csv"].stat().st_size > 0
    assert "advisory" in files["summary"].read_text(encoding="utf-8")
