"""Malformed MATPOWER case files: each problem names the file, the line and the column.

The base text is the invented ``fixtures/harrowdene.m``; each case changes one line. Column
names are the case format's (pypower ``idx_*`` modules, see ``test_matpower.py``); line
numbers are those of the fixture as an editor shows them.
"""

from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from calibra.io.matpower import MatpowerFormatError, read_matpower
from tests.io.site_builder import find

LINES = (Path(__file__).parent / "fixtures" / "harrowdene.m").read_text().splitlines()


def changed(line: int, old: str, new: str) -> str:
    lines = list(LINES)
    assert old in lines[line - 1], lines[line - 1]
    lines[line - 1] = lines[line - 1].replace(old, new, 1)
    return "\n".join(lines) + "\n"


def problems(text: str):
    with pytest.raises(MatpowerFormatError) as info:
        read_matpower(text)
    return info.value.problems


BAD = [
    # (line, old, new, reported line, column, part of the message)
    (20, "\t38\t", "\t3x8\t", 20, "PD", "'3x8' is not a number"),
    (20, "\t38\t", "\tInf\t", 20, "PD", "'Inf' is not a finite number"),
    (24, "\t33\t", "\t3e\t", 24, "BASE_KV", "'3e' is not a number"),  # continued row
    (43, "\t360;", ";", 43, "ANGMAX", "has 12 columns; the first row has 13"),
    (46, "6\t7", "6\t9", 46, "T_BUS", "unknown bus 9"),
    (40, "1\t2", "11\t2", 40, "F_BUS", "unknown bus 11"),
    (33, "\t6\t40", "\t8\t40", 33, "GEN_BUS", "unknown bus 8"),
    (21, "\t3\t1\t", "\t2\t1\t", 21, "BUS_I", "bus 2 appears twice (first at line 20)"),
    (19, "\t1\t3", "\t1.5\t3", 19, "BUS_I", "'1.5' is not a whole number"),
    (22, "\t4\t1\t", "\t4\t5\t", 22, "BUS_TYPE", "bus type 5 is not 1 (PQ)"),
    (40, "\t0\t1\t-360", "\t0\t2\t-360", 40, "BR_STATUS", "status 2 is not 1"),
    (43, "0.0100\t0.0520", "0\t0", 43, "BR_X", "BR_R and BR_X are both zero"),
    (45, "0.985", "-0.985", 45, "TAP", "-0.985 is negative"),
    (46, "6\t7", "7\t7", 46, "T_BUS", "connects bus 7 to itself"),
    (10, "'2'", "'1'", 10, "version", "version '1'; only version 2 is read"),
    (14, "100", "-100", 14, "baseMVA", "'-100' is not a system MVA base"),
    (14, "100", "hundred", 14, "baseMVA", "'hundred' is not a system MVA base"),
    (1, "function mpc = harrowdene", "function [baseMVA, bus, gen, branch] = harrowdene", 1,
     None, "is a version 1 case file"),
    (35, "];", "", 31, None, "the '[' opened on this line is never closed"),
    (10, "'2';", "'2;", 10, None, "is not closed on its line"),
    (49, "];", "]];", 49, None, "']' closes nothing"),
]


@pytest.mark.parametrize("line,old,new,row,column,message", BAD,
                         ids=[f"{b[0]}-{b[4]}-{b[5][:20]}" for b in BAD])
def test_a_bad_line_is_named(line, old, new, row, column, message):
    problem = find(problems(changed(line, old, new)), "<text>", row, column)
    assert message in problem.message, problem.message


def test_missing_version_and_matrices_are_named():
    text = changed(10, "mpc.version = '2';", "")
    assert "no mpc.version line" in find(problems(text), "<text>", None, "version").message
    text = changed(39, "mpc.branch = [", "mpc.branches = [")
    found = problems(text)
    assert find(found, "<text>", None, "branch").message == "no mpc.branch matrix"
    assert "not read" in find(found, "<text>", 39, "branches", "warning").message
    text = changed(14, "mpc.baseMVA = 100;", "")
    assert "no mpc.baseMVA" in find(problems(text), "<text>", None, "baseMVA").message


def test_too_few_columns_in_every_row():
    lines = list(LINES)
    for k in (32, 33, 34):  # the generator rows cut to 9 columns
        lines[k - 1] = "\t".join(lines[k - 1].split("\t")[:10])
    p = find(problems("\n".join(lines)), "<text>", 32, "PMIN")
    assert "has 9 columns; at least 10 are needed (GEN_BUS … PMIN)" in p.message


def test_a_file_is_named_by_its_name(tmp_path):
    path = tmp_path / "valley.m"
    path.write_text(changed(20, "\t38\t", "\t3x8\t"))
    with pytest.raises(MatpowerFormatError) as info:
        read_matpower(path)
    assert find(info.value.problems, "valley.m", 20, "PD").message == "'3x8' is not a number"
    with pytest.raises(MatpowerFormatError) as info:
        read_matpower(tmp_path / "absent.m")
    assert find(info.value.problems, "absent.m", None, None).message == "file not found"


def test_other_statements_are_reported_not_dropped():
    text = changed(15, "", "mpc.note = 'commissioned 2026';\nx = 3;\nif true")
    case = read_matpower(text)
    assert "not needed to review telemetry" in find(case.problems, "<text>", 15, "note",
                                                    "warning").message
    assert "not part of the case" in find(case.problems, "<text>", 16, None, "warning").message
    assert "not an assignment" in find(case.problems, "<text>", 17, None, "warning").message


# ----------------------------------------------------------------------------- fuzzing
@st.composite
def damaged(draw) -> str:
    lines = list(LINES)
    for _ in range(draw(st.integers(1, 4))):
        k = draw(st.integers(0, len(lines) - 1))
        how = draw(st.sampled_from(["delete", "repeat", "cut", "cell", "text"]))
        if how == "delete":
            del lines[k]
        elif how == "repeat":
            lines.insert(k, lines[k])
        elif how == "cut":
            lines[k] = lines[k][: draw(st.integers(0, max(len(lines[k]) - 1, 0)))]
        elif how == "cell":
            cells = lines[k].split("\t")
            at = draw(st.integers(0, len(cells) - 1))
            cells[at] = draw(st.sampled_from(["", "x", "1e999", "-0", "NaN", "[", "]", "'",
                                              "...", "%", ";", "1;2", "{", "0x1F"]))
            lines[k] = "\t".join(cells)
        else:
            lines[k] = draw(st.text(max_size=40))
    return "\n".join(lines) + "\n"


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(damaged())
def test_a_damaged_case_is_read_or_refused_line_by_line(text):
    # Common practice, no source: any damage gives a case or one-line problems, never a
    # traceback; every error names a line or a column of the file.
    try:
        case = read_matpower(text)
    except MatpowerFormatError as exc:
        assert exc.problems
        for p in exc.problems:
            assert "\n" not in p.message
            assert p.severity != "error" or p.row is not None or p.column is not None, p
    else:
        assert case.network.n_bus > 0
