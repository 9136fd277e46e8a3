"""``calibra import``: the preview writes nothing; the import builds a folder the loader
accepts and prints every problem; bad input is a message with exit code 1 or 2, never a
traceback. The exports are those of tests/io/test_site_import.py (the invented Fenwick Hollow
site)."""

from __future__ import annotations

import pytest

from calibra.cli import main
from tests.io.test_site_import import exports  # noqa: F401  (the fixture)


def args(exports, target, *extra) -> list[str]:  # noqa: F811
    return ["import", str(target), "--history", str(exports["history"]), "--points",
            str(exports["points"]), "--network", str(exports["buses"]), str(exports["branches"]),
            "--timezone", "Europe/Berlin", "--frequency", "50", "--column",
            "tag=SCADA point", "--column", "quantity=Meas type", "--column", "end=Terminal",
            *extra]


def run(capsys, argv) -> tuple[int, str]:
    code = main(argv)
    captured = capsys.readouterr()
    assert "Traceback" not in captured.out + captured.err
    return code, captured.err + captured.out  # stderr (progress, usage) first


def test_preview_writes_nothing(exports, tmp_path, capsys):  # noqa: F811
    target = tmp_path / "site"
    code, out = run(capsys, args(exports, target, "--preview"))
    assert code == 0 and not target.exists()
    assert "  tag          <- 'SCADA point' (column 1, given): FNH.TLR1.P | FNH.TLR1.Q | " \
        "TLR.FNH1.P" in out
    assert "headers not placed (not read): 'Description'" in out
    assert "historian exports: 1 file(s), long export: 1; 28 timed rows, 7 tags" in out
    assert "snapshot interval: 1 min (inferred from the samples (median spacing 60 s))" in out
    assert "export tags not in the point list: 0" in out
    assert "network: buses.csv and branches.csv tables" in out and "5 buses, 5 branches" in out
    assert "note: the site is named 'site' after its folder (--name)" in out
    assert out.rstrip().endswith("preview: nothing written")


def test_import_builds_a_usable_site(exports, tmp_path, capsys):  # noqa: F811
    target = tmp_path / "site"
    code, out = run(capsys, args(exports, target, "--name", "Fenwick Hollow district"))
    assert code == 0, out
    assert "warning: points.csv, row 1, column 'description': unknown column; ignored" in out
    assert out.rstrip().endswith("result: usable (0 errors, 1 warning)")
    assert main(["check", str(target)]) == 0
    code, out = run(capsys, args(exports, target))
    assert code == 1 and "the folder exists and is not empty" in out and "--replace" in out


def test_a_required_column_not_found(exports, tmp_path, capsys):  # noqa: F811
    argv = args(exports, tmp_path / "site")
    argv.remove("tag=SCADA point")
    argv.remove("--column")
    code, out = run(capsys, argv)
    assert code == 1 and not (tmp_path / "site").exists()
    assert "error: " + str(exports["points"]) + ", column 'tag': no header holds calibra's " \
        "column 'tag'" in out
    assert "result: nothing written (1 error, 0 warnings)" in out


@pytest.mark.parametrize("extra,message", [
    (["--column", "tag"], "--column 'tag': write COLUMN=HEADER"),
    (["--max-age", "soon"], "--max-age 'soon' is not a duration"),
    (["--interval=-1min"], "--interval '-1min' is not a duration"),
])
def test_options_that_cannot_be_read(exports, tmp_path, capsys, extra, message):  # noqa: F811
    code, out = run(capsys, args(exports, tmp_path / "site", *extra))
    assert code == 2 and message in out


def test_unusable_after_writing_says_what_to_do(exports, tmp_path, capsys):  # noqa: F811
    # the list names a bus the tables do not have: the folder is written, the loader refuses it
    text = exports["points"].read_text().replace("FNH132,,kV", "NOWHERE,,kV")
    exports["points"].write_text(text)
    code, out = run(capsys, args(exports, tmp_path / "site"))
    assert code == 1
    assert "error: points.csv, row 6, column 'Equipment': unknown bus 'NOWHERE'" in out
    assert "the folder is written: correct its site.toml or the files" in out


def test_preview_lists_what_the_readers_warn_about(exports, tmp_path, capsys):  # noqa: F811
    from tests.io.test_site_import import FIXTURES

    argv = args(exports, tmp_path / "site", "--preview")
    at = argv.index("--network")
    argv[at + 1:at + 3] = [str(FIXTURES / "harrowdene.m")]
    code, out = run(capsys, argv)
    assert code == 0
    assert "warning: " + str(FIXTURES / "harrowdene.m") + ", row 55, column 'gencost'" in out
    assert "point-list elements that are not a bus or branch of it: 5 (FNH-TLR-1, FNH132, " in out
