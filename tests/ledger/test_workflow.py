"""Finding states through reviews and user actions; undo; the cache agrees with the log.

The expected states follow the life cycle the ledger documents (common practice of
maintenance work orders, no source): new → confirmed → corrected → repaired → verified.
"""

import random

import numpy as np
import pandas as pd
import pytest

from calibra.ledger import Ledger, LedgerError, default_user
from tests.ledger.conftest import WEEK1, WEEK2, WEEK3, Clock, finding

REPAIR = pd.Timestamp("2026-03-11T10:30", tz="UTC")  # inside WEEK2


def _state(ledger: Ledger, fid: str) -> str:
    return ledger.findings().loc[fid, "state"]


def test_life_cycle_to_verified(ledger):
    review1 = ledger.record_review([finding("MC-L1-P"), finding("MC-L1-Q")], *WEEK1,
                                   {"threshold": 3.0}, {"snapshots": 2016})
    assert set(ledger.findings()["state"]) == {"new"}
    ledger.confirm("MC-L1-P|reversed", user="ana", note="seen on the one-line too")
    assert _state(ledger, "MC-L1-P|reversed") == "confirmed"
    ledger.mark_reversed("MC-L1-P", user="ana")
    assert _state(ledger, "MC-L1-P|reversed") == "corrected"
    assert _state(ledger, "MC-L1-Q|reversed") == "new", "a correction acts on its own tag only"
    (c,) = ledger.active_corrections()
    assert (c.tag, c.gain, c.bias, c.valid_from, c.valid_until) == ("MC-L1-P", -1.0, 0.0,
                                                                    None, None)
    ledger.mark_repaired("MC-L1-P", REPAIR, user="ben")
    assert _state(ledger, "MC-L1-P|reversed") == "repaired"
    assert ledger.active_corrections() == [], "the repair ends the correction"
    (closed,) = ledger.active_corrections(WEEK1)
    assert closed.valid_until == REPAIR

    # WEEK2 ends after the repair and no longer finds MC-L1-P: verified by the review itself
    review2 = ledger.record_review([finding("MC-L1-Q")], *WEEK2, {}, {})
    assert _state(ledger, "MC-L1-P|reversed") == "verified"
    found = ledger.findings()
    assert found.loc["MC-L1-Q|reversed", "first_seen_review"] == review1
    assert found.loc["MC-L1-Q|reversed", "last_seen_review"] == review2
    assert found.loc["MC-L1-P|reversed", "last_seen_review"] == review1
    log = ledger.history(tag="MC-L1-P")
    assert list(log["action"]) == ["found", "confirm", "mark_reversed", "mark_repaired",
                                   "verify"]
    assert list(log["user"]) == ["calibra", "ana", "ana", "ben", "calibra"]
    assert log.iloc[1]["payload"] == {"note": "seen on the one-line too"}
    assert log.iloc[4]["payload"] == {"review": review2}


def test_repair_checked_only_by_periods_after_it(ledger):
    ledger.record_review([finding("MC-L1-P")], *WEEK1, {}, {})
    ledger.mark_repaired("MC-L1-P", REPAIR, user="ben")
    # a period ending before the repair says nothing about it
    ledger.record_review([], WEEK1[0] - pd.Timedelta(days=7), WEEK1[0], {}, {})
    assert _state(ledger, "MC-L1-P|reversed") == "repaired"
    # a period straddling the repair that still finds it cannot tell: stays repaired
    ledger.record_review([finding("MC-L1-P")], *WEEK2, {}, {})
    assert _state(ledger, "MC-L1-P|reversed") == "repaired"
    # found again in a period wholly after the repair: the repair did not cure it
    ledger.record_review([finding("MC-L1-P")], *WEEK3, {}, {})
    assert _state(ledger, "MC-L1-P|reversed") == "new"
    reopen = ledger.history(finding_id="MC-L1-P|reversed").iloc[-1]
    assert (reopen["action"], reopen["user"]) == ("reopen", "calibra")
    assert "after the repair" in reopen["payload"]["reason"]


def test_dismissed_stays_unless_fitted_values_change(ledger):
    ledger.record_review([finding("MC-T1-V", "scale", factor=1.732)], *WEEK1, {}, {})
    ledger.dismiss("MC-T1-V|scale", "VT replaced last month; data before that", user="ana")
    ledger.record_review([finding("MC-T1-V", "scale", factor=1.70)], *WEEK2, {}, {})
    assert _state(ledger, "MC-T1-V|scale") == "dismissed"
    ledger.record_review([finding("MC-T1-V", "scale", factor=1.20)], *WEEK3, {}, {})
    assert _state(ledger, "MC-T1-V|scale") == "new"
    assert ledger.findings().loc["MC-T1-V|scale", "factor"] == 1.20
    log = ledger.history(finding_id="MC-T1-V|scale")
    assert log.iloc[1]["payload"]["values"]["factor"] == 1.732
    assert log.iloc[-1]["payload"]["values"]["factor"] == 1.20


def test_known_finding_keeps_state_and_takes_new_values(ledger):
    ledger.record_review([finding("MC-L1-P", "offset", offset=4.0)], *WEEK1, {}, {})
    ledger.confirm("MC-L1-P|offset", user="ana")
    ledger.record_review([finding("MC-L1-P", "offset", offset=4.4, evidence="new text")],
                         *WEEK2, {}, {})
    row = ledger.findings().loc["MC-L1-P|offset"]
    assert (row["state"], row["offset"], row["evidence"]) == ("confirmed", 4.4, "new text")


def test_refused_actions_name_the_reason(ledger):
    ledger.record_review([finding("MC-L1-P")], *WEEK1, {}, {})
    ledger.confirm("MC-L1-P|reversed", user="ana")
    with pytest.raises(LedgerError, match="cannot confirm MC-L1-P.reversed: it is confirmed"):
        ledger.confirm("MC-L1-P|reversed", user="ana")
    with pytest.raises(LedgerError, match="no finding"):
        ledger.confirm("MC-L9-P|reversed", user="ana")
    with pytest.raises(LedgerError, match="'MC-L9-P' has no finding"):
        ledger.mark_reversed("MC-L9-P", user="ana")
    with pytest.raises(ValueError, match="reason"):
        ledger.dismiss("MC-L1-P|reversed", "  ", user="ana")
    with pytest.raises(ValueError, match="non-zero"):
        ledger.apply_scale("MC-L1-P", 0.0, user="ana")
    with pytest.raises(ValueError, match="timezone"):
        ledger.mark_repaired("MC-L1-P", "2026-03-11 10:30", user="ana")
    ledger.mark_reversed("MC-L1-P", user="ana")
    with pytest.raises(LedgerError, match="already in force"):
        ledger.mark_reversed("MC-L1-P", user="ana")
    ledger.mark_repaired("MC-L1-P", REPAIR, user="ana")
    with pytest.raises(LedgerError, match="nothing to mark repaired"):
        ledger.mark_repaired("MC-L1-P", REPAIR, user="ana")
    with pytest.raises(ValueError, match="unknown state"):
        ledger.findings("fixed")


def test_review_input_is_checked(ledger):
    with pytest.raises(ValueError, match="twice: MC-L1-P.reversed"):
        ledger.record_review([finding("MC-L1-P"), finding("MC-L1-P")], *WEEK1, {}, {})
    with pytest.raises(ValueError, match="period_start.*timezone"):
        ledger.record_review([], "2026-03-02", WEEK1[1], {}, {})
    with pytest.raises(ValueError, match="before it starts"):
        ledger.record_review([], WEEK1[1], WEEK1[0], {}, {})
    with pytest.raises(ValueError, match="unknown finding kind"):
        ledger.record_review([finding("MC-L1-P", "wobbly")], *WEEK1, {}, {})
    assert ledger.reviews().empty, "a refused review leaves nothing behind"


def test_undo_walks_back_one_action_at_a_time(ledger):
    ledger.record_review([finding("MC-L1-P")], *WEEK1, {}, {})
    fid = "MC-L1-P|reversed"
    ids = [ledger.confirm(fid, user="ana"), ledger.mark_reversed("MC-L1-P", user="ana"),
           ledger.add_note(fid, "crew booked for Thursday", user="ana")]
    undo_note = ledger.undo(fid, user="ana")
    assert _state(ledger, fid) == "corrected"
    ledger.undo("MC-L1-P", user="ana")  # by tag: the correction
    assert ledger.active_corrections() == []
    assert _state(ledger, fid) == "confirmed"
    ledger.undo(fid, user="ana")
    assert _state(ledger, fid) == "new"
    with pytest.raises(LedgerError, match="nothing to undo"):
        ledger.undo(fid, user="ana")
    log = ledger.history(finding_id=fid)
    assert log.loc[ids[2], "undone_by"] == undo_note
    assert list(log.loc[log["action"] == "undo", "undoes"]) == [ids[2], ids[1], ids[0]]
    assert ledger.cache_disagreements() == []


def test_undo_repair_reopens_the_corrections_it_ended(ledger):
    ledger.record_review([finding("MC-L1-P", "scale", factor=1.5)], *WEEK1, {}, {})
    ledger.apply_scale("MC-L1-P", 1.5, user="ana", valid_from=WEEK1[0])
    ledger.mark_repaired("MC-L1-P", REPAIR, user="ben")
    assert ledger.active_corrections() == []
    ledger.undo("MC-L1-P", user="ben")
    (c,) = ledger.active_corrections()
    assert (c.gain, c.valid_from, c.valid_until) == (pytest.approx(1 / 1.5), WEEK1[0], None)
    assert _state(ledger, "MC-L1-P|scale") == "corrected"


def test_tag_actions_do_not_reach_findings_that_came_later(ledger):
    ledger.record_review([finding("MC-L1-P")], *WEEK1, {}, {})
    ledger.mark_reversed("MC-L1-P", user="ana")
    ledger.record_review([finding("MC-L1-P"), finding("MC-L1-P", "noisy")], *WEEK2, {}, {})
    states = ledger.findings()["state"]
    assert (states["MC-L1-P|reversed"], states["MC-L1-P|noisy"]) == ("corrected", "new")
    # undo through the later finding reaches only actions that concern it: none but its own
    with pytest.raises(LedgerError, match="nothing to undo"):
        ledger.undo("MC-L1-P|noisy", user="ana")


def test_dismiss_from_any_state_and_confirm_again(ledger):
    ledger.record_review([finding("MC-L1-P")], *WEEK1, {}, {})
    ledger.mark_reversed("MC-L1-P", user="ana")
    ledger.dismiss("MC-L1-P|reversed", "flow really reversed during maintenance", user="ana")
    assert _state(ledger, "MC-L1-P|reversed") == "dismissed"
    assert len(ledger.active_corrections()) == 1, "dismissing leaves corrections alone"
    ledger.confirm("MC-L1-P|reversed", user="ana")
    assert _state(ledger, "MC-L1-P|reversed") == "confirmed"


def test_default_user_and_fallback(ledger, monkeypatch):
    ledger.record_review([finding("MC-L1-P")], *WEEK1, {}, {})
    ledger.confirm("MC-L1-P|reversed")
    assert ledger.history()["user"].iloc[-1] == default_user()

    def no_login():
        raise OSError("no login name")

    monkeypatch.setattr("getpass.getuser", no_login)
    assert default_user() == "unknown"


def test_reviews_keep_settings_and_summary(ledger):
    settings = {"threshold": np.float64(3.0), "window": pd.Timestamp("2026-03-02", tz="UTC"),
                "tags": ("a", "b"), "missing": float("nan")}
    review = ledger.record_review([], *WEEK1, settings, {"snapshots": np.int64(2016)},
                                  started_at=WEEK1[1])
    row = ledger.reviews().loc[review]
    assert row["settings"] == {"threshold": 3.0, "window": "2026-03-02T00:00:00+00:00",
                               "tags": ["a", "b"], "missing": None}
    assert row["summary"] == {"snapshots": 2016}
    assert (row["period_start"], row["period_end"], row["started_at"]) == (*WEEK1, WEEK1[1])
    assert row["finished_at"] > row["started_at"]
    with pytest.raises(TypeError, match="cannot store a object"):
        ledger.record_review([], *WEEK1, {"x": object()}, {})


def test_active_corrections_by_time_and_period(ledger):
    ledger.record_review([finding("MC-L1-P", "offset", offset=2.0), finding("MC-L2-P")],
                         *WEEK1, {}, {})
    ledger.apply_offset("MC-L1-P", 2.0, user="ana", valid_from="2026-03-04T00:00Z")
    ledger.mark_repaired("MC-L1-P", REPAIR, user="ben")
    ledger.mark_reversed("MC-L2-P", user="ana")
    tags = lambda cs: sorted(c.tag for c in cs)  # noqa: E731
    assert tags(ledger.active_corrections()) == ["MC-L2-P"]
    assert tags(ledger.active_corrections("2026-03-03T00:00Z")) == ["MC-L2-P"]
    assert tags(ledger.active_corrections("2026-03-05T00:00Z")) == ["MC-L1-P", "MC-L2-P"]
    assert tags(ledger.active_corrections(REPAIR)) == ["MC-L2-P"], "valid_until is exclusive"
    assert tags(ledger.active_corrections(WEEK3)) == ["MC-L2-P"]
    assert tags(ledger.active_corrections(WEEK2)) == ["MC-L1-P", "MC-L2-P"]


TAGS = ["MC-L1-P", "MC-L1-Q", "MC-T1-V"]
KINDS = ["reversed", "scale", "offset"]


def _random_action(led: Ledger, rng: random.Random, step: int) -> None:
    tag, kind = rng.choice(TAGS), rng.choice(KINDS)
    fid = f"{tag}|{kind}"
    what = rng.randrange(9)
    if what == 0:
        led.confirm(fid, user="u")
    elif what == 1:
        led.dismiss(fid, "test", user="u")
    elif what == 2:
        led.mark_reversed(tag, user="u")
    elif what == 3:
        led.apply_scale(tag, rng.choice([1.5, 0.5]), user="u")
    elif what == 4:
        led.apply_offset(tag, 3.0, user="u")
    elif what == 5:
        led.mark_repaired(tag, WEEK2[0] + pd.Timedelta(hours=step), user="u")
    elif what == 6:
        led.add_note(rng.choice([fid, tag]), "n", user="u")
    elif what == 7:
        led.undo(rng.choice([fid, tag]), user="u")
    else:
        found = [finding(t, k, factor=rng.choice([1.5, 2.5]))
                 for t in TAGS for k in KINDS if rng.random() < 0.5]
        led.record_review(found, *rng.choice([WEEK1, WEEK2, WEEK3]), {}, {})


@pytest.mark.parametrize("seed", range(12))
def test_cached_state_agrees_with_replay_after_random_work(tmp_path, seed):
    rng = random.Random(seed)
    with Ledger(tmp_path / "l.sqlite", clock=Clock()) as led:
        led.record_review([finding(t, k) for t in TAGS for k in KINDS], *WEEK1, {}, {})
        for step in range(60):
            try:
                _random_action(led, rng, step)
            except LedgerError:
                pass
        states = led.findings()["state"]
        assert states.nunique() >= 2, "the random work should reach several states"
        assert led.cache_disagreements() == []
        before = (states.to_dict(), led.active_corrections(WEEK1))
        led.rebuild_cache()
        assert (led.findings()["state"].to_dict(), led.active_corrections(WEEK1)) == before
