"""``calibra check`` and the command line around it: what it prints and the exit codes (0 usable,
1 not, 2 usage), help, a new subcommand."""

import argparse

from calibra import cli
from calibra.cli import main


def test_check_a_usable_site(files, tmp_path, capsys):
    files.snapshots["week.csv"].set(3, "FNH.V", "ERR")
    assert main(["check", str(files.write(tmp_path))]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[0] == "site: Fenwick Hollow district (timezone Europe/Berlin)"
    assert "5 buses in 4 substations" in out[1]
    assert out[2].startswith("points: 7 (p_flow 2,")
    assert out[3].startswith("snapshots: 4 from 2024-03-04 09:00 to 2024-03-04 09:03 UTC")
    assert "warning: snapshots/week.csv, row 3, column 'FNH.V': 'ERR' is not a number" in out[-2]
    assert out[-1] == "result: usable (0 errors, 1 warning)"


def test_check_an_unusable_site_lists_every_problem(files, tmp_path, capsys):
    files.buses.set(6, "kv", "abc")
    files.branches.set(3, "kind", "cable")
    assert main(["check", str(files.write(tmp_path))]) == 1
    captured = capsys.readouterr()
    lines = captured.out.splitlines()
    assert "error: network/buses.csv, row 6, column 'kv': 'abc' is not a number" in lines
    assert any(ln.startswith("error: network/branches.csv, row 3, column 'kind'") for ln in lines)
    assert lines[-1] == "result: not usable (2 errors, 0 warnings)"
    assert "Traceback" not in captured.out + captured.err


def test_strict_check_fails_on_warnings(files, tmp_path, capsys):
    files.snapshots["week.csv"].set(3, "FNH.V", "ERR")
    assert main(["check", "--strict", str(files.write(tmp_path))]) == 1
    assert capsys.readouterr().out.splitlines()[-1] == (
        "result: not usable in strict mode (0 errors, 1 warning)"
    )


def test_missing_folder_is_a_usage_error(tmp_path, capsys):
    assert main(["check", str(tmp_path / "nowhere")]) == 2
    assert "no such folder" in capsys.readouterr().err


def test_usage_errors(capsys):
    assert main([]) == 2
    assert main(["audit", "x"]) == 2
    assert main(["check"]) == 2
    assert "usage: calibra" in capsys.readouterr().err


def test_help_exits_zero(capsys):
    assert main(["--help"]) == 0
    assert "check" in capsys.readouterr().out


def test_unreadable_file_is_one_line_not_a_traceback(files, tmp_path, capsys, monkeypatch):
    root = files.write(tmp_path)

    def refuse(*args, **kwargs):
        raise PermissionError(13, "Permission denied", str(root / "points.csv"))

    monkeypatch.setattr(cli.check, "load_site", refuse)
    assert main(["check", str(root)]) == 1
    err = capsys.readouterr().err
    assert err.strip() == f"calibra check: Permission denied ({root / 'points.csv'})"


def test_a_new_subcommand_is_one_entry(capsys, monkeypatch):
    def add(parser: argparse.ArgumentParser) -> None:
        parser.add_argument("count", type=int)

    def run(args: argparse.Namespace) -> int:
        print("x" * args.count)
        return 0

    monkeypatch.setattr(cli, "COMMANDS", [*cli.COMMANDS, cli.Command("echo", "repeat", add, run)])
    assert main(["echo", "3"]) == 0
    assert capsys.readouterr().out == "xxx\n"


def test_subcommand_help(capsys):
    assert main(["check", "-h"]) == 0
    assert "--strict" in capsys.readouterr().out
