"""Broken telemetry is reported as such, the rest of the period is still reviewed, and the
diagnosis does not blame meters for topology or observability problems (common practice,
no source)."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from calibra.diagnosis.findings import findings_table
from calibra.diagnosis.review import review_site
from tests.diagnosis.scenarios import generated_scenario


@pytest.fixture(scope="module")
def clean():
    """Two days of five-minute IEEE 57 data (pypower case57), no meter faults."""
    return generated_scenario("case57", 41, periods=576, faults=False)


def _blamed(result) -> set[str]:
    table = findings_table(result.findings)
    return set(table.loc[table["finding"] != "unverifiable", "tag"])


def test_status_point_contradicted_by_flows(clean):
    site = clean.site
    pts = site.points
    stat = pts[pts["quantity"] == "branch_status"]
    flows = pts[pts["quantity"] == "p_flow"]
    loaded = clean.true_values[flows.index].abs().median()
    branch = next(flows.at[t, "element"] for t in loaded.sort_values(ascending=False).index
                  if flows.at[t, "element"] in set(stat["element"]))
    status_tag = stat.index[stat["element"] == branch][0]
    snaps = site.snapshots.copy()
    snaps.iloc[100:160, snaps.columns.get_loc(status_tag)] = 0.0  # reads open, flows go on
    result = review_site(replace(site, snapshots=snaps))
    conflicts = result.summary.status_conflicts
    assert len(conflicts) == 1 and status_tag in conflicts[0] and "60 snapshots" in conflicts[0]
    assert _blamed(result) == set()


def test_silent_substation_and_unobservable_area(clean):
    """Every meter of the busiest substation missing for five hours: those snapshots are
    estimated on their observable part (reason recorded), the period is still reviewed, and
    no neighbour is blamed."""
    site = clean.site
    pts = site.points
    busiest = pts["substation"].value_counts().index[0]
    tags = pts.index[pts["substation"] == busiest]
    snaps = site.snapshots.copy()
    snaps.iloc[200:260, [snaps.columns.get_loc(t) for t in tags]] = np.nan
    result = review_site(replace(site, snapshots=snaps))
    out = result.evidence.period.outcomes
    assert out["converged"].all()
    window = out.iloc[200:260]
    assert (window["n_used"] < out["n_used"].median()).all()
    assert _blamed(result) == set()


def test_divergent_snapshot_is_reported_and_the_week_goes_on(clean):
    """A snapshot of garbage (every value multiplied by 40) does not converge or fails the
    chi-square test; it is recorded with its reason, the other snapshots are reviewed, and no
    meter is blamed for one bad snapshot."""
    site = clean.site
    snaps = site.snapshots.copy()
    analog = [c for c in snaps.columns if site.points.at[c, "quantity"] != "branch_status"]
    snaps.loc[snaps.index[300], analog] *= 40.0
    result = review_site(replace(site, snapshots=snaps))
    out = result.evidence.period.outcomes
    row = out.iloc[300]
    assert not row["converged"] or not row["chi2_passed"]
    assert isinstance(row["reason"], str) and row["reason"]
    assert out.drop(index=out.index[300])["converged"].mean() > 0.99
    assert _blamed(result) == set()
