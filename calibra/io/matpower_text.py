"""The text of a MATPOWER case file, read as MATLAB assignments without running anything.

A case file (MATPOWER case format, version 2) is a MATLAB function whose body assigns the
fields of one struct: ``mpc.version = '2';``, ``mpc.baseMVA = 100;`` and matrices such as
``mpc.bus = [ 1 3 0 0 ...; ... ];``. This module splits the text into statements and gives
back every assignment with the line of each matrix cell, so that problems can name the line.

Handled as MATLAB does (MATLAB language rules, from memory): ``%`` comments to the end of the
line and ``%{`` … ``%}`` block comments, ``...`` continuing a statement on the next line,
statements ended by ``;``, ``,`` or a line end, matrix rows ended by ``;`` or a line end, cells
separated by spaces or commas, texts in single or double quotes (a quote right after a name,
a number or a closing bracket is a transpose, not a text).
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

from calibra.io.problems import ProblemLog

_LINE_END = re.compile(r"\r\n|\r|\n")
_PUNCT = set("=[]{}();,")
_WORD = re.compile(r"(?:(?!\.\.\.)[^\s=\[\]{}();,'\"%])+")
_TRANSPOSE_AFTER = re.compile(r"[\w.\])}']")
_OPEN, _CLOSE = "[{(", "]})"


@dataclass(frozen=True)
class Token:
    """One token: ``kind`` is ``word``, ``text`` (quotes removed), ``punct`` or ``eol``."""

    kind: str
    text: str
    line: int


@dataclass
class Assignment:
    """``target = value``. ``kind``: ``text``, ``word`` (one number or name), ``matrix``,
    ``cell`` or ``other``; ``rows`` holds a matrix's rows as ``[(line, cell text)]``."""

    target: str
    line: int
    kind: str
    value: str = ""
    rows: list[list[tuple[int, str]]] = field(default_factory=list)


@dataclass
class CaseText:
    """The statements of a case file: its function header and its assignments in order."""

    function_name: str | None = None
    outputs: list[str] = field(default_factory=list)
    header_line: int | None = None
    assignments: list[Assignment] = field(default_factory=list)


def _line_tokens(line: str, number: int, file: str, log: ProblemLog) -> tuple[list[Token], bool]:
    """The tokens of one line without its comment; True when it ends with ``...``."""
    tokens: list[Token] = []
    pos = 0
    while pos < len(line):
        ch = line[pos]
        if ch.isspace():
            pos += 1
        elif ch == "%":
            return tokens, False
        elif line.startswith("...", pos):
            return tokens, True
        elif ch in _PUNCT:
            tokens.append(Token("punct", ch, number))
            pos += 1
        elif ch == "'" and pos > 0 and _TRANSPOSE_AFTER.match(line[pos - 1]):
            tokens.append(Token("punct", "'", number))
            pos += 1
        elif ch in "'\"":
            end = pos + 1
            while True:
                end = line.find(ch, end)
                if end < 0 or not line.startswith(ch, end + 1):
                    break
                end += 2  # a doubled quote stands for one quote
            if end < 0:
                log.error(file, number, None, f"the text in quotes from {line[pos:pos + 20]!r} "
                          "is not closed on its line")
                return tokens, False
            tokens.append(Token("text", line[pos + 1:end].replace(ch * 2, ch), number))
            pos = end + 1
        else:
            match = _WORD.match(line, pos)
            tokens.append(Token("word", match.group(0), number))
            pos = match.end()
    return tokens, False


def tokenize(text: str, file: str, log: ProblemLog) -> list[Token]:
    """Every token of the text, with an ``eol`` token where a line ends a statement."""
    lines = _LINE_END.split(text)
    tokens: list[Token] = []
    in_block = False
    for number, line in enumerate(lines, start=1):
        stripped = line.strip()
        if stripped == "%{":
            in_block = True
            continue
        if in_block:
            in_block = stripped != "%}"
            continue
        found, continued = _line_tokens(line, number, file, log)
        tokens += found
        if not continued:
            tokens.append(Token("eol", "", number))
    return tokens


def _statements(tokens: list[Token], file: str, log: ProblemLog) -> list[list[Token]]:
    """Tokens grouped into statements (terminators at bracket depth 0 removed)."""
    statements: list[list[Token]] = []
    current: list[Token] = []
    opened: list[Token] = []
    for token in tokens:
        if token.kind == "punct" and token.text in _OPEN:
            opened.append(token)
        elif token.kind == "punct" and token.text in _CLOSE:
            if not opened:
                log.error(file, token.line, None, f"'{token.text}' closes nothing")
            elif _OPEN.index(opened[-1].text) != _CLOSE.index(token.text):
                log.error(file, token.line, None,
                          f"'{token.text}' does not close the '{opened[-1].text}' opened at "
                          f"line {opened[-1].line}")
                opened.pop()
            else:
                opened.pop()
        if not opened and (token.kind == "eol" or token.text in ";," and token.kind == "punct"):
            if current:
                statements.append(current)
            current = []
        else:
            current.append(token)
    if opened:
        log.error(file, opened[-1].line, None,
                  f"the '{opened[-1].text}' opened on this line is never closed")
    elif current:
        statements.append(current)
    return statements


def _matrix_rows(body: list[Token]) -> list[list[tuple[int, str]]]:
    """The rows of a matrix body (between its brackets); empty rows are left out."""
    rows: list[list[tuple[int, str]]] = []
    row: list[tuple[int, str]] = []
    for token in body:
        if token.kind == "eol" or (token.kind == "punct" and token.text == ";"):
            if row:
                rows.append(row)
            row = []
        elif not (token.kind == "punct" and token.text == ","):
            row.append((token.line, token.text if token.kind != "text" else f"'{token.text}'"))
    if row:
        rows.append(row)
    return rows


def _assignment(target: str, value: list[Token], line: int) -> Assignment:
    if len(value) == 1 and value[0].kind in ("text", "word"):
        return Assignment(target, line, value[0].kind, value[0].text)
    if value and value[0].text == "[" and value[0].kind == "punct":
        last = value[-1]
        if last.kind == "punct" and last.text == "]":
            return Assignment(target, line, "matrix", rows=_matrix_rows(value[1:-1]))
    if value and value[0].text == "{" and value[0].kind == "punct":
        return Assignment(target, line, "cell")
    return Assignment(target, line, "other", " ".join(t.text for t in value))


def parse_case_text(text: str, file: str, log: ProblemLog) -> CaseText:
    """The function header and assignments of a case file; statements that are neither
    (other than ``end``/``return``) are reported as warnings and not read."""
    case = CaseText()
    for statement in _statements(tokenize(text, file, log), file, log):
        first = statement[0]
        words = [t.text for t in statement]
        if first.kind == "word" and first.text == "function" and case.header_line is None:
            case.header_line = first.line
            if "=" in words:
                at = words.index("=")
                case.outputs = [w for w in words[1:at] if w not in "[],"]
                case.function_name = words[at + 1] if at + 1 < len(words) else None
            else:
                case.function_name = words[1] if len(words) > 1 else None
        elif (len(statement) >= 3 and first.kind == "word" and statement[1].kind == "punct"
              and statement[1].text == "="):
            case.assignments.append(_assignment(first.text, statement[2:], first.line))
        elif words in (["end"], ["return"], ["endfunction"]):
            continue
        else:
            shown = " ".join(words)
            log.warning(file, first.line, None,
                        f"'{shown[:40]}' is not an assignment of the case; not read")
    return case
