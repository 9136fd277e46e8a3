"""Damaged IEEE Common Data Format files: the reader returns a case or raises CdfFormatError
with one-line problems that name the line; never another exception.

The base text is the published IEEE 14-bus case (UW Power Systems Test Case Archive,
``tests/io/fixtures/ieee14.cdf``); the mutations cut, repeat, blank, shift and retype its
lines and put drawn text into its fields.
"""

from __future__ import annotations

import re
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from calibra.io import CdfFormatError, read_cdf
from tests.robustness.mutations import NASTY_CELLS

LINES = (Path(__file__).parents[1] / "io" / "fixtures" / "ieee14.cdf").read_text().splitlines()


@st.composite
def damaged_cdf(draw) -> str:
    lines = list(LINES)
    for _ in range(draw(st.integers(1, 4))):
        k = draw(st.integers(0, len(lines) - 1))
        how = draw(st.sampled_from(["delete", "repeat", "blank", "cut", "field", "shift",
                                    "end_marker", "text"]))
        line = lines[k]
        if how == "delete":
            del lines[k]
        elif how == "repeat":
            lines.insert(k, line)
        elif how == "blank":
            lines[k] = ""
        elif how == "cut":
            lines[k] = line[: draw(st.integers(0, max(len(line) - 1, 0)))]
        elif how == "field":
            fields = line.split()
            if fields:
                at = draw(st.integers(0, len(fields) - 1))
                fields[at] = draw(st.sampled_from(NASTY_CELLS)).replace("\n", " ") or "x"
                lines[k] = " ".join(fields)
        elif how == "shift":
            lines[k] = " " * draw(st.integers(1, 5)) + line
        elif how == "end_marker":
            lines.insert(k, "-999")
        else:
            lines[k] = draw(st.text(max_size=60))
    return "\n".join(lines) + "\n"


@settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(damaged_cdf())
def test_a_damaged_cdf_is_read_or_refused_line_by_line(text):
    try:
        case = read_cdf(text)
    except CdfFormatError as exc:
        problems = exc.problems
        assert any(p.severity == "error" for p in problems)
    else:
        problems = case.problems
        network = case.network
        assert network.n_bus > 0 and network.reference_bus in network.buses.index
        assert network.branches["from_bus"].isin(network.buses.index).all()
    # Lines as editors count them: \r\n, \n or a lone \r (common practice, no source).
    lines = len(re.split(r"\r\n|\r|\n", text))
    for p in problems:
        assert "\n" not in str(p) and p.file == "<text>"
        assert p.row is None or 1 <= p.row <= lines, str(p)
