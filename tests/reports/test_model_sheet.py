"""The network model owner's sheet and model_work_orders.csv: each model finding with the
model's value, the estimate ± its standard deviation, the meters it explains, separability and
what to check, with the crews' safety cautions; kept off the field crew's checklist."""

from __future__ import annotations

import csv
import shutil
import subprocess

import pandas as pd
import pytest

from calibra.diagnosis.findings import Finding, findings_table
from calibra.reports import (
    MODEL_WORK_ORDER_COLUMNS,
    SAFETY_CAUTIONS,
    model_sheet,
    needing_field_work,
    needing_model_work,
    write_model_work_orders_csv,
)
from tests.ledger.conftest import finding
from tests.reports.test_pdf import SAFETY_PHRASES, _pdf_text, _words

GENERATED = pd.Timestamp("2026-03-10T09:15", tz="UTC")
PERIOD = (pd.Timestamp("2026-03-02", tz="UTC"), pd.Timestamp("2026-03-09", tz="UTC"))


def _model(element: str, parameter: str, model: float, estimate: float,
           alternative: str = "") -> Finding:
    return Finding(tag=f"{element}:{parameter}", device="", substation="Marlow Cross",
                   finding="model", confidence=0.93, evidence="the meters fit another value",
                   scope="model", element=element, unit="pu" if parameter == "x" else "ratio",
                   parameter=parameter, model_value=model, estimated_value=estimate,
                   estimated_std=0.0004, explains="MC-L1-P, KB-L1-P",
                   alternative_meters=alternative)


@pytest.fixture
def table() -> pd.DataFrame:
    frame = findings_table([_model("MC-KB", "x", 0.0650, 0.0505),
                            _model("MC-T1", "tap", 1.0, 1.025, alternative="MC-T1-P"),
                            finding("AV-L3-P")])
    frame["state"] = "new"
    return frame


def test_model_findings_go_to_the_owner_not_the_crew(table):
    assert list(needing_field_work(table)["tag"]) == ["AV-L3-P"]
    assert list(needing_model_work(table)["tag"]) == ["MC-KB:x", "MC-T1:tap"]
    table.loc[table["tag"] == "MC-KB:x", "state"] = "dismissed"
    assert list(needing_model_work(table)["tag"]) == ["MC-T1:tap"]


def test_sheet_carries_values_separability_checks_and_cautions(table):
    sheet = model_sheet("Fernhollow", needing_model_work(table), GENERATED, PERIOD)
    page = _words(sheet.whole_html())
    # -22 %: (0.0505 - 0.0650) / 0.0650 (arithmetic)
    assert "model 0.065 pu, the meters fit 0.0505 ± 0.0004 pu (-22 %)" in page
    assert "not separable: errors of MC-T1-P explain it as well" in page
    assert "separable: no one or two meter errors" in page
    assert "MC-L1-P, KB-L1-P" in page and "nameplate" in page and "tap position" in page
    for caution in SAFETY_CAUTIONS:
        assert caution.text.replace("'", "&#x27;") in page
    assert "model-change procedures" in page and "the owner of the network model" in page


def test_work_orders_csv_rows_per_check_with_cautions_last(table, tmp_path):
    path = write_model_work_orders_csv(needing_model_work(table), tmp_path / "m.csv",
                                       site_name="Fernhollow")
    with path.open(encoding="utf-8-sig") as handle:
        rows = list(csv.reader(handle))
    assert rows[0] == MODEL_WORK_ORDER_COLUMNS
    body = [dict(zip(rows[0], r, strict=True)) for r in rows[1:] if r[1]]
    assert {r["element"] for r in body} == {"MC-KB", "MC-T1"}
    x = next(r for r in body if r["parameter"] == "x")
    assert float(x["change_pct"]) == pytest.approx(-22.3, abs=0.05)
    assert x["separable"] == "yes" and x["explains"] == "MC-L1-P, KB-L1-P"
    tap = next(r for r in body if r["parameter"] == "tap")
    assert tap["separable"] == "no" and tap["change_pct"] == ""
    tail = " ".join(r[0] for r in rows if r[0].startswith("Safety:"))
    assert all(c.text in tail for c in SAFETY_CAUTIONS)


@pytest.mark.skipif(shutil.which("pdftotext") is None, reason="poppler-utils not installed")
def test_sheet_prints_to_pdf(table, tmp_path):
    pytest.importorskip("PySide6")
    from calibra.gui.qt_pdf import sheets_to_pdf

    sheet = model_sheet("Fernhollow", needing_model_work(table), GENERATED, PERIOD)
    path = sheets_to_pdf([sheet], tmp_path / "model.pdf", title="Fernhollow")
    text = _words(_pdf_text(path))
    assert "Network model checks" in text and "MC-KB" in text and "MC-T1" in text
    for phrase in SAFETY_PHRASES:
        assert phrase in text, phrase
    subprocess.run(["pdftoppm", "-r", "50", "-png", "-f", "1", "-l", "1", str(path),
                    str(tmp_path / "page")], check=True)
    assert list(tmp_path.glob("page*.png"))
