"""Findings about an RTU (its clock) go to the RTU/SCADA engineer's own sheet and CSV, not to
the crews' substation checklists; both carry the crews' safety cautions (lockout/tagout, CT
secondary, qualified personnel: NFPA 70E §120.5, OSHA 29 CFR 1910.269, as
calibra.reports.safety names them) and defer to the utility's procedures."""

import csv

import pandas as pd

from calibra.diagnosis.findings import Finding, findings_table
from calibra.reports import (
    RTU_WORK_ORDER_COLUMNS,
    needing_field_work,
    needing_rtu_work,
    rtu_sheet,
    work_order_rows,
    work_order_sheets,
    write_rtu_work_orders_csv,
)


def _with_clock(findings: pd.DataFrame) -> pd.DataFrame:
    clock = Finding(tag="RTU-MC", device="", substation="Marlow Cross", finding="time_offset",
                    confidence=0.96, evidence="RTU-MC's points read 240 s late", offset=240.0,
                    scope="rtu", element="RTU-MC", unit="s", rtu="RTU-MC")
    return pd.concat([findings.astype(object), findings_table([clock]).astype(object)],
                     ignore_index=True)


def test_clock_findings_leave_the_crews_sheets(findings, points):
    table = _with_clock(findings)
    crews = needing_field_work(table)
    assert "time_offset" not in set(crews["finding"]) and len(crews) == len(findings)
    assert "RTU-MC" not in set(work_order_rows(crews, points)["tags"])
    sheets = work_order_sheets("Fernhollow", crews, points, "2026-03-10T08:00Z")
    assert all("RTU clock" not in s.whole_html() for s in sheets.values())
    assert list(needing_rtu_work(table)["tag"]) == ["RTU-MC"]


def test_ledger_state_decides_what_is_still_due(findings):
    table = _with_clock(findings)
    table["state"] = "new"
    table.loc[table["finding"] == "time_offset", "state"] = "repaired"
    assert needing_rtu_work(table).empty


def test_rtu_sheet_lists_the_checks_points_and_cautions(findings, points):
    table = needing_rtu_work(_with_clock(findings))
    html = rtu_sheet("Fernhollow", table, points, pd.Timestamp("2026-03-10T08:00Z")).whole_html()
    assert "RTU and SCADA checks" in html and "RTU-MC" in html
    for tag in ("MC-L1-P", "MC-L1-Q", "MC-T1-V", "MC-L2-I"):  # the RTU's points
        assert tag in html
    assert "AV-L3-P" not in html  # another RTU's point
    assert "240 s late" in html and "time reference" in html
    assert "lockout/tagout" in html and "secondary circuit of a CT" in html
    assert "control room" in html and "procedures" in html


def test_rtu_csv_rows_and_safety_rows(findings, points, tmp_path):
    table = needing_rtu_work(_with_clock(findings))
    path = write_rtu_work_orders_csv(table, points, tmp_path / "rtu.csv", site_name="Fernhollow")
    with path.open(encoding="utf-8-sig", newline="") as handle:
        rows = list(csv.reader(handle))
    assert rows[0] == RTU_WORK_ORDER_COLUMNS
    checks = [r for r in rows[1:] if r[1] == "RTU-MC"]
    assert len(checks) >= 3 and all(float(r[4]) == 240.0 for r in checks)
    assert "MC-L2-I" in checks[0][5]
    safety = " ".join(r[0] for r in rows[1:] if r[0].startswith("Safety:"))
    assert "lockout/tagout" in safety and "qualified personnel" in safety


def _with_taps(findings: pd.DataFrame) -> pd.DataFrame:
    offset = Finding(tag="MC-T1-TAP", device="", substation="Marlow Cross",
                     finding="tap_offset", confidence=0.99, offset=2.0,
                     evidence="the telemetered step reads +2 steps off the implied one",
                     scope="tap changer", quantity="tap_position", element="MC-T1",
                     unit="step", rtu="RTU-MC")
    moving = Finding(tag="AV-T2", device="", substation="Ashvale", finding="tap_unreported",
                     confidence=0.99, factor=1.06, evidence="steps back and forth 12 times",
                     scope="tap changer", quantity="tap_position", element="AV-T2",
                     unit="ratio")
    return pd.concat([findings.astype(object), findings_table([offset, moving]).astype(object)],
                     ignore_index=True)


def test_tap_findings_go_to_the_rtu_sheet_with_the_oltc_caution(findings, points, tmp_path):
    """Tap findings are for the RTU/SCADA or protection and control engineer, never a CT
    crew; their sheet adds the caution to work on an OLTC only under the utility's switching
    and isolation procedures (common practice, no source)."""
    table = _with_taps(findings)
    crews = needing_field_work(table)
    assert not crews["finding"].str.startswith("tap_").any() and len(crews) == len(findings)
    due = needing_rtu_work(table)
    assert set(due["tag"]) == {"MC-T1-TAP", "AV-T2"}
    html = rtu_sheet("Fernhollow", due, points, pd.Timestamp("2026-03-10T08:00Z")).whole_html()
    assert "Transformer MC-T1 tap changer" in html and "Tap position offset" in html
    assert "+2 steps" in html and "No tap-position point" in html
    assert "switching and isolation procedures" in html and "lockout/tagout" in html
    assert "protection and control engineer" in html
    path = write_rtu_work_orders_csv(due, points, tmp_path / "rtu.csv", site_name="Fernhollow")
    text = path.read_text(encoding="utf-8-sig")
    assert "position transmitter" in text and "tap_step_pct" in text
    with path.open(encoding="utf-8-sig", newline="") as handle:
        rows = [r for r in csv.DictReader(handle) if r["finding"] == "Tap position offset"]
    # Not the RTU's analog points (the fixture's point list has no tap point).
    assert rows and all(r["offset_s"] == "" and r["points"] == "" for r in rows)
