"""Reading a printed checklist back with poppler's pdftotext, one page at a time.

What is checked (issue 14) is the practice of printed forms: every page names its subject and
says which page of how many it is, a continued table repeats its heading and column heads, and
no row is cut over two pages (common practice, no source).
"""

from __future__ import annotations

import re
import subprocess
import unicodedata
from dataclasses import dataclass
from pathlib import Path

FOOTER = re.compile(r"·\s*(?P<sub>.+?)\s*·\s*findings are advisory.*?page\s+(?P<i>\d+)\s+of\s+"
                    r"(?P<n>\d+)\s*$")


def normal(text: str) -> str:
    """NFKC (Qt writes ligatures such as 'ﬁ'), whitespace collapsed."""
    return re.sub(r"\s+", " ", unicodedata.normalize("NFKC", text)).strip()


def squeezed(text: str) -> str:
    """NFKC with all whitespace removed: a wrapped line reads as the same text."""
    return re.sub(r"\s+", "", unicodedata.normalize("NFKC", text))


@dataclass
class PrintedPage:
    number: int  # in the file
    text: str  # NFKC, layout kept
    substation: str  # from the footer
    index: int  # page i …
    total: int  # … of n (for the substation)

    @property
    def devices(self) -> list[str]:
        """The device headings on the page, in order, as printed."""
        return re.findall(r"^\s*(Device .+?)\s*$", self.text, flags=re.M)


def page_count(path: Path) -> int:
    info = subprocess.run(["pdfinfo", str(path)], check=True, capture_output=True, text=True)
    return int(re.search(r"Pages:\s+(\d+)", info.stdout).group(1))


def read_pages(path: Path) -> list[PrintedPage]:
    """Every page of the PDF with its footer read back; a page without one fails."""
    pages = []
    for k in range(1, page_count(path) + 1):
        raw = subprocess.run(["pdftotext", "-layout", "-enc", "UTF-8", "-f", str(k), "-l",
                              str(k), str(path), "-"], check=True, capture_output=True,
                             text=True).stdout
        text = unicodedata.normalize("NFKC", raw)
        lines = [line for line in text.splitlines() if line.strip()]
        match = FOOTER.search(lines[-1]) if lines else None
        assert match, f"page {k}: no footer with substation and 'page i of n': {lines[-1:]}"
        pages.append(PrintedPage(k, text, match["sub"], int(match["i"]), int(match["n"])))
    return pages


def check_pages(pages: list[PrintedPage], checks: dict[str, list[str]],
                tags: dict[str, set[str]]) -> None:
    """The layout rules, for ``checks`` (every check text per substation) and ``tags`` (the
    points each substation's sheet lists)."""
    by_sub: dict[str, list[PrintedPage]] = {}
    for page in pages:
        by_sub.setdefault(page.substation, []).append(page)
    assert set(by_sub) == set(checks)
    for sub, own in by_sub.items():
        assert [p.index for p in own] == list(range(1, len(own) + 1)), sub
        assert {p.total for p in own} == {len(own)}, sub
        first, rest = own[0], own[1:]
        assert normal(first.text).startswith(f"Field checklist: {normal(sub)}"), sub
        shown = re.search(r"Points to check\s+(\d+)", first.text)
        listed = {t for t in tags[sub] if re.search(rf"(?<![\w.]){re.escape(t)}(?![\w.])",
                                                   "\n".join(p.text for p in own))}
        assert shown and int(shown[1]) == len(listed) == len(tags[sub]), (sub, shown, listed)
        previous_device = first.devices[-1] if first.devices else ""
        for page in rest:
            assert normal(page.text).startswith(f"{normal(sub)} (continued)"), page.number
            if page.devices:
                head = page.devices[0]
                # one table per device: the same heading again is the table continued
                if _strip(head) == _strip(previous_device):
                    assert head.endswith("(continued)"), (page.number, head)
                else:
                    assert not head.endswith("(continued)"), (page.number, head)
                assert re.search(r"Check\s+As found\s+As left\s+Initials\s+Date", page.text)
                previous_device = page.devices[-1]
        for check in checks[sub]:
            holding = [p.number for p in own if squeezed(check) in squeezed(p.text)]
            assert len(holding) >= 1, f"{sub}: check split or missing: {check!r}"


def _strip(heading: str) -> str:
    return heading.removesuffix("(continued)").strip()

