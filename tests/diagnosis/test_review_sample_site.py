"""The week review of the bundled sample site against its ground truth.

The truth file (sample_site/truth/faults.csv) is written by the simulator; only tests read it.
Acceptance (issue: week review): every seeded fault found with the right kind, scale factors
within 2 %, drift and stuck onsets within 6 hours, no fault-free point flagged other than as
unverifiable (common practice for acceptance of a telemetry audit, no source).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from calibra.diagnosis.findings import FINDING_COLUMNS, findings_table
from calibra.diagnosis.review import review_site
from calibra.io import load_site
from tests.diagnosis.scoring import score

SAMPLE = Path(__file__).resolve().parents[2] / "sample_site"


@pytest.fixture(scope="module")
def sample_review():
    site = load_site(SAMPLE)
    truth = pd.read_csv(SAMPLE / "truth" / "faults.csv")
    return site, truth, review_site(site)


def test_every_seeded_fault_found_with_its_kind(sample_review):
    _, truth, result = sample_review
    s = score(findings_table(result.findings), truth)
    assert s.missed == [] and s.wrong_kind == [], s.line()
    assert s.false_alarms == [], s.false_alarms
    assert result.clocks == [], "the sample's RTUs keep time: no time_offset finding"


def test_factors_and_onsets(sample_review):
    _, truth, result = sample_review
    s = score(findings_table(result.findings), truth)
    assert s.factor_errors and max(s.factor_errors.values()) < 0.02
    assert s.onset_errors_h and max(s.onset_errors_h.values()) < 6.0
    table = findings_table(result.findings).set_index("tag")
    for r in truth[truth["kind"] == "drift"].itertuples():
        assert abs(table.at[r.tag, "drift_per_day"] / r.drift_per_day - 1) < 0.1
    for r in truth[truth["kind"] == "offset"].itertuples():
        assert abs(table.at[r.tag, "offset"] - r.offset) < 0.1 * abs(r.offset)


def test_critical_meters_are_unverifiable_with_a_suggestion(sample_review):
    site, _, result = sample_review
    table = findings_table(result.findings)
    unver = table[table["finding"] == "unverifiable"]
    assert set(unver["tag"]) == {"ULV.33.DRM1.MW", "ULV.33.DRM1.MVAR"}
    assert unver["evidence"].str.contains("would make it checkable").all()


def test_device_level_conclusions(sample_review):
    _, truth, result = sample_review
    table = findings_table(result.findings).set_index("tag")
    # CT polarity: both channels of the device, scope device.
    assert (table.loc[["NRC.110.PLB1.MW", "NRC.110.PLB1.MVAR"], "scope"] == "device").all()
    # The single reversed Q channel stays a point finding.
    assert table.at["NRC.110.T1H.MVAR", "scope"] == "point"
    # The CT tap: configured 450:5, wired 300:5.
    assert "300:5" in table.at["NRC.33.T2L.MW", "cause"]
    assert "√3" in table.at["NRC.110.BB1.KV", "cause"]
    assert "crossed" in table.at["NRC.110.MRG1.MW", "cause"]


def test_findings_table_is_the_documented_interface(sample_review):
    _, _, result = sample_review
    table = findings_table(result.findings)
    assert list(table.columns[: len(FINDING_COLUMNS)]) == FINDING_COLUMNS
    assert table["confidence"].between(0, 1).all()
    assert not table["evidence"].eq("").any()
    assert np.isfinite(table.loc[table["finding"].isin(["reversed", "scale"]), "factor"]).all()
