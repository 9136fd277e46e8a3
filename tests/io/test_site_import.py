"""Building a site folder from a user's exports (calibra.io.site_import, import_mapping,
import_history): the mapping, the refusals naming the file, the copies, site.toml, the
all-or-nothing write.

The exports are the invented Fenwick Hollow site of ``site_builder`` (a point list with a
control system's headers, a long historian export, the two network tables, the MATPOWER
fixture). Outside references: the IEEE Common Data Format fixture (``fixtures/ieee14.cdf``,
the published IEEE 14-bus system: 14 buses, 20 branches) and the MATPOWER case format
(Zimmerman et al. 2011) through the reader's own tests; the rest is the folder format this
project documents (sample_site/README.md).
"""

from __future__ import annotations

import tomllib
from pathlib import Path

import openpyxl
import pandas as pd
import pytest

from calibra.io import load_site
from calibra.io.import_mapping import Placement, map_point_list
from calibra.io.problems import ProblemLog
from calibra.io.site_import import (
    IMPORT_PROBLEMS_FILE,
    ImportRefused,
    ImportRequest,
    SiteFields,
    build_site,
    plan_import,
    run_import,
    site_toml,
)
from calibra.progress import Cancelled, Progress
from tests.io.site_builder import Table

FIXTURES = Path(__file__).parent / "fixtures"
HEADERS = {"tag": "SCADA point", "quantity": "Meas type", "element": "Equipment",
           "end": "Terminal", "unit": "Units", "full_scale": "Span", "accuracy_pct": "Class",
           "substation": "Station", "device": "Transducer", "rtu": "RTU name",
           "channel": "Ch", "ct_ratio": "CT ratio", "vt_ratio": "VT", "sigma": "Std dev",
           "note": "Remarks"}
GIVEN = {"tag": "SCADA point", "quantity": "Meas type", "end": "Terminal"}
FIELDS = SiteFields("Fenwick Hollow district", "Europe/Berlin", 50.0,
                    reference_bus="FNH132")


def long_export(files) -> str:
    """The site's wide snapshots as a long export (UTC times, a quality column)."""
    wide = pd.read_csv(pd.io.common.StringIO(files.snapshots["week.csv"].text()),
                       index_col="timestamp")
    rows = ["point,time,value,quality"]
    for stamp, row in wide.iterrows():
        utc = pd.Timestamp(stamp).tz_localize("Europe/Berlin").tz_convert("UTC")
        rows += [f"{tag},{utc:%Y-%m-%dT%H:%M:%SZ},{value:g},good"
                 for tag, value in row.items() if pd.notna(value)]
    return "\n".join(rows) + "\n"


@pytest.fixture
def exports(files, tmp_path) -> dict[str, Path]:
    """A utility's exports of the invented site, in their own folder."""
    root = tmp_path / "exports"
    table = files.points
    table.header = [HEADERS[h] for h in table.header]
    table.add_column("Description", "bay")
    root.mkdir()
    (root / "pointlist.csv").write_text(table.text(), encoding="utf-8")
    (root / "history.csv").write_text(long_export(files), encoding="utf-8")
    (root / "bus_table.csv").write_text(files.buses.text(), encoding="utf-8")
    (root / "branch_table.csv").write_text(files.branches.text(), encoding="utf-8")
    return {"points": root / "pointlist.csv", "history": root / "history.csv",
            "buses": root / "bus_table.csv", "branches": root / "branch_table.csv"}


def request(exports, target: Path, **changes) -> ImportRequest:
    values = dict(target=target, history=(exports["history"],), point_list=exports["points"],
                  network=(exports["buses"], exports["branches"]), fields=FIELDS,
                  columns=dict(GIVEN))
    values.update(changes)
    return ImportRequest(**values)


def refusal(req: ImportRequest) -> list:
    with pytest.raises(ImportRefused) as caught:
        plan_import(req)
    return caught.value.problems


# ----------------------------------------------------------------------------- mapping
def test_mapping_given_recognised_and_unplaced(exports):
    log = ProblemLog()
    mapping = map_point_list(exports["points"], "pointlist.csv", GIVEN, None, log)
    assert not log.items
    how = {m.column: (m.header, m.placement) for m in mapping.matches}
    assert how["tag"] == ("SCADA point", Placement.GIVEN)
    assert how["element"] == ("Equipment", Placement.RECOGNISED)  # an alias of calibra's
    assert how["vt_ratio"] == ("VT", Placement.RECOGNISED)
    assert mapping.unplaced == ("Description",)
    tag = next(m for m in mapping.matches if m.column == "tag")
    assert tag.samples == ("FNH.TLR1.P", "FNH.TLR1.Q", "TLR.FNH1.P") and tag.where == "column 1"
    assert mapping.rows == 7 and "FNH.V" in mapping.tags


def test_required_column_not_found_names_file_and_headers(exports):
    log = ProblemLog()
    assert map_point_list(exports["points"], "pointlist.csv", {}, None, log) is None
    missing = {p.column: p for p in log.items}
    assert {"tag", "quantity"} <= set(missing)  # neither header is a recognised name
    message = missing["tag"].message
    assert missing["tag"].file == "pointlist.csv"
    assert "'SCADA point'" in message and "'Description'" in message and "--column tag=" in message


def test_given_header_not_in_file_and_unknown_column(exports):
    log = ProblemLog()
    given = {**GIVEN, "element": "Bay id", "colour": "Span"}
    assert map_point_list(exports["points"], "pointlist.csv", given, None, log) is None
    by_column = {p.column: p.message for p in log.items}
    assert "'Bay id' is not a header of this file" in by_column["element"]
    assert "not a column of calibra's point list" in by_column["colour"]


def test_two_headers_for_one_column_are_an_error(exports, tmp_path):
    table = Table(exports["points"].read_text()).add_column("Name", "x")  # alias of tag too
    path = tmp_path / "two.csv"
    path.write_text(table.text())
    log = ProblemLog()  # 'SCADA point' is no recognised name: 'Name' is the tag
    mapping = map_point_list(path, "two.csv", {"quantity": "Meas type", "end": "Terminal"},
                             None, log)
    assert mapping.header_of("tag") == "Name" and "SCADA point" in mapping.unplaced
    log = ProblemLog()
    table.header[table.header.index("SCADA point")] = "Point"
    path.write_text(table.text())
    assert map_point_list(path, "two.csv", {"quantity": "Meas type", "end": "Terminal"}, None,
                          log) is None
    assert "two headers read as tag: 'Point' (column 1) and 'Name' (column 17)" in \
        log.items[0].message


def test_spreadsheet_sheet_and_title_row(exports, tmp_path):
    # written by openpyxl, an independent writer of the format
    table = Table(exports["points"].read_text())
    book = openpyxl.Workbook()
    book.active.title = "Cover"
    book.active.append(["issue 3"])
    sheet = book.create_sheet("Analogs")
    sheet.append(["Fenwick Hollow telemetry"])
    sheet.append(table.header)
    for row in table.rows:
        sheet.append(row)
    path = tmp_path / "list.xlsx"
    book.save(path)
    log = ProblemLog()
    mapping = map_point_list(path, "list.xlsx", GIVEN, "Analogs", log)
    assert mapping.file == "list.xlsx [Analogs]" and mapping.sheet == "Analogs"
    assert next(m for m in mapping.matches if m.column == "tag").where == "A"
    log = ProblemLog()
    assert map_point_list(path, "list.xlsx", GIVEN, "Digitals", log) is None
    assert "has no sheet 'Digitals'" in log.items[0].message and "'Analogs'" in \
        log.items[0].message


# ----------------------------------------------------------------------------- refusals
def test_missing_files_unknown_formats_and_wrong_network(exports, tmp_path):
    target = tmp_path / "site"
    problems = refusal(request(exports, target, point_list=tmp_path / "nope.csv"))
    assert problems[0].file.endswith("nope.csv") and problems[0].message == "file not found"
    odd = tmp_path / "list.txt"
    odd.write_text("a,b\n")
    problems = refusal(request(exports, target, point_list=odd))
    assert "not a point list this program reads" in problems[0].message
    history = tmp_path / "history.xml"
    history.write_text("<x/>")
    problems = refusal(request(exports, target, history=(history,)))
    assert "not a historian export this program reads" in problems[0].message
    problems = refusal(request(exports, target, network=(exports["buses"],)))
    assert "give one network file" in problems[0].message
    assert not target.exists()


def test_a_non_empty_target_is_refused(exports, tmp_path):
    target = tmp_path / "site"
    target.mkdir()
    (target / "notes.txt").write_text("mine")
    problems = refusal(request(exports, target))
    assert problems[0].file == str(target) and "not empty" in problems[0].message
    assert (target / "notes.txt").read_text() == "mine"


def test_base_must_agree_with_a_case_file(exports, tmp_path):
    changed = SiteFields("Harrowdene", "Europe/London", 50.0, base_mva=50.0)
    problems = refusal(request(exports, tmp_path / "site", fields=changed,
                               network=(FIXTURES / "harrowdene.m",)))
    assert any("the file's base is 100 MVA, not the 50 MVA" in p.message for p in problems)


def test_bad_timezone_and_reference_bus(exports, tmp_path):
    problems = refusal(request(exports, tmp_path / "s", fields=SiteFields("x", "Mars/Olympus",
                                                                          50.0)))
    assert problems[0].column == "timezone" and "IANA" in problems[0].message
    problems = refusal(request(exports, tmp_path / "s",
                               fields=SiteFields("x", "UTC", 50.0, reference_bus="NOPE")))
    assert "bus 'NOPE' is not a bus of the network" in problems[0].message


# ----------------------------------------------------------------------------- the folder
def test_plan_build_and_load(exports, tmp_path):
    target = tmp_path / "site"
    plan = plan_import(request(exports, target))
    assert plan.history.interval == pd.Timedelta("1min")  # inferred: samples a minute apart
    assert plan.export_tags_not_listed() == [] and plan.listed_tags_not_exported() == []
    assert plan.network.buses == 5 and plan.network.branches == 5 and plan.base_mva == 100.0
    assert any("100 MVA assumed" in n for n in plan.notes)
    assert not target.exists()  # planning writes nothing
    assert build_site(plan) is None
    for src, dest in plan.copies:
        assert (target / dest).read_bytes() == src.read_bytes()  # unchanged copies
    config = tomllib.loads((target / "site.toml").read_text())
    assert config["site"]["timezone"] == "Europe/Berlin" and config["site"]["base_mva"] == 100
    assert config["points"]["columns"]["tag"] == "SCADA point"
    assert config["snapshots"]["interval"] == "1min"
    site = load_site(target)
    assert site.snapshots.shape == (4, 7)
    assert site.snapshots.loc[:, "FNH.V"].tolist() == [133.1, 133.0, 133.2, 133.1]
    unplaced = [p for p in site.problems if p.column == "description"]
    assert unplaced  # the header not placed is reported by the loader, not lost


def test_a_case_file_network_and_unknown_tags(exports, tmp_path):
    history = tmp_path / "extra.csv"
    history.write_text(exports["history"].read_text() + "GHOST.P,2024-03-04T09:00:00Z,1,good\n")
    plan = plan_import(request(exports, tmp_path / "site", history=(history,),
                               network=(FIXTURES / "ieee14.cdf",),
                               fields=SiteFields("IEEE 14", "UTC", 60.0)))
    assert plan.network.buses == 14 and plan.network.branches == 20  # the published system
    assert plan.base_mva is None and plan.export_tags_not_listed() == ["GHOST.P"]
    assert "FNH-TLR-1" in plan.unknown_elements()  # the list names another network
    assert "base_mva" not in site_toml(plan)  # the file's own base


def test_cancel_leaves_no_folder(exports, tmp_path):
    target = tmp_path / "site"
    plan = plan_import(request(exports, target))
    progress = Progress()
    progress.cancel()
    with pytest.raises(Cancelled):
        build_site(plan, progress)
    assert not target.exists() and list(tmp_path.iterdir()) == [tmp_path / "exports"]


def test_replace_keeps_the_old_folder_beside(exports, tmp_path):
    target = tmp_path / "site"
    target.mkdir()
    (target / "calibra-ledger.sqlite").write_bytes(b"decisions")
    plan = plan_import(request(exports, target, replace=True))
    old = build_site(plan)
    assert old is not None and old.parent == tmp_path and old.name.startswith("site.replaced-")
    assert (old / "calibra-ledger.sqlite").read_bytes() == b"decisions"
    assert (target / "site.toml").is_file()


def test_point_list_headers_for_the_mapping_choices(exports, tmp_path):
    from calibra.io.import_mapping import point_list_headers

    log = ProblemLog()
    assert point_list_headers(exports["points"], None, log)[:3] == ["SCADA point", "Meas type",
                                                                    "Equipment"]
    assert point_list_headers(exports["points"], "Analogs", log) is None
    assert "a CSV file has no sheets" in log.items[-1].message


def test_every_problem_is_written_into_the_new_folder(exports, tmp_path):
    """Nothing the user gave is lost: the loader's problems and the plan's warnings are all
    in import-problems.csv, one row each, with file, row and column (common practice, no
    source)."""
    history = tmp_path / "extra.csv"
    history.write_text(exports["history"].read_text() + "GHOST.P,2024-03-04T09:00:00Z,1,good\n")
    outcome = run_import(plan_import(request(exports, tmp_path / "site", history=(history,))))
    assert outcome.usable and outcome.problems_file == tmp_path / "site" / IMPORT_PROBLEMS_FILE
    listed = pd.read_csv(outcome.problems_file, dtype=str, keep_default_na=False)
    assert list(listed.columns) == ["severity", "file", "row", "column", "count", "message"]
    assert len(listed) == len({str(p) + str(p.count) for p in outcome.problems}) > 0
    ghost = listed[listed["message"].str.contains("GHOST.P")]
    assert len(ghost) == 1 and ghost.iloc[0]["file"] == "snapshots/extra.csv"
    assert ghost.iloc[0]["row"] != ""  # the row of the unknown tag's first sample
    assert load_site(tmp_path / "site").problems == outcome.problems  # the file does not count
