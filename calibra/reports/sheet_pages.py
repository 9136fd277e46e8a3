"""A substation's field checklist as blocks that are never split, laid out page by page.

Qt's rich-text engine splits a table row over two sheets; a crew then reads half a check on
one page and the rest on the next, without knowing which device it belongs to. Here a sheet
is kept as blocks (the opening header, the safety box, each finding's heading row together
with its check rows, the remarks) and :meth:`Sheet.pages` packs whole blocks onto pages with
a measuring function the printer supplies (``fits(html) -> bool``: the page's HTML fits one
sheet). Every page after the first starts with "<substation> (continued)" and, in the middle
of a device, that device's heading "(continued)" with the column heads. Qt-free.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from html import escape

#: The column heads of every device table (repeated on each page that carries the table).
TABLE_HEAD = ("<thead><tr><th width=\"52%\">Check</th><th width=\"16%\">As found</th>"
              "<th width=\"16%\">As left</th><th width=\"8%\">Initials</th>"
              "<th width=\"8%\">Date</th></tr></thead>")
CONTINUED = "(continued)"


def ruled_table(attributes: str = "", padding: int = 3) -> str:
    """Opening tag of a full-width ruled table."""
    return (f'<table width="100%" border="1" cellspacing="0" cellpadding="{padding}"'
            f'{" " + attributes if attributes else ""}>')


@dataclass
class DeviceSection:
    """One device's table: ``units`` are the row groups of its findings (a heading row and
    its check rows), each kept on one page where it fits."""

    title: str
    units: list[list[str]]


@dataclass
class Sheet:
    """One substation's checklist: document head, opening blocks, device tables, closing."""

    substation: str
    head: str  # <html><head>…</head><body>
    opening: list[str]
    devices: list[DeviceSection]
    closing: str
    tags: list[str] = field(default_factory=list)

    def whole_html(self) -> str:
        """The checklist as one HTML document (for a browser or an on-screen preview)."""
        body = self.opening + [_device_html(d.title, [r for u in d.units for r in u])
                               for d in self.devices] + [self.closing]
        return "\n".join([self.head, *body, "</body></html>"])

    def pages(self, fits: Callable[[str], bool]) -> list[str]:
        """The checklist as one HTML document per page, no block split over two pages."""
        return _Packer(self, fits).run()


def _device_html(title: str, rows: list[str]) -> str:
    return (f"<h2>{escape(title)}</h2>" + ruled_table('style="margin-bottom: 14px"')
            + f"{TABLE_HEAD}<tbody>{''.join(rows)}</tbody></table>")


class _Packer:
    """Greedy page filling: a block goes on the current page when the page still fits."""

    def __init__(self, sheet: Sheet, fits: Callable[[str], bool]):
        self.sheet, self.fits = sheet, fits
        self.done: list[str] = []
        self.blocks: list[str] = []  # finished parts of the current page
        self.table: tuple[str, list[str]] | None = None  # the device table being filled
        self.first = True

    def run(self) -> list[str]:
        for block in self.sheet.opening:
            self._place_block(block)
        for device in self.sheet.devices:
            self._device(device)
        self._place_block(self.sheet.closing)
        self._close_table()
        self.done.append(self._html())
        return self.done

    # ------------------------------------------------------------------ page assembly
    def _html(self, extra: str = "") -> str:
        parts = list(self.blocks)
        if self.table is not None:
            parts.append(_device_html(*self.table))
        if extra:
            parts.append(extra)
        return "\n".join([self.sheet.head, *parts, "</body></html>"])

    def _heading(self) -> str:
        return f"<h1>{escape(self.sheet.substation)} {CONTINUED}</h1>"

    def _alone(self) -> bool:
        """Nothing on the current page but its heading (so a block that does not fit here
        fits nowhere and is printed anyway)."""
        return len(self.blocks) <= (0 if self.first else 1) and (
            self.table is None or not self.table[1])

    def _new_page(self) -> None:
        self._close_table()
        self.done.append(self._html())
        self.first = False
        self.blocks = [self._heading()]

    def _close_table(self) -> None:
        if self.table is not None and self.table[1]:
            self.blocks.append(_device_html(*self.table))
        self.table = None

    # ------------------------------------------------------------------ placing
    def _place_block(self, block: str) -> None:
        self._close_table()
        if not self.fits(self._html(block)) and not self._alone():
            self._new_page()
        self.blocks.append(block)

    def _device(self, device: DeviceSection) -> None:
        self._close_table()
        self.table = (device.title, [])
        started = False  # some rows of this device already on an earlier page
        for unit in device.units:
            if self._add_rows(unit):
                continue
            self._page_break(device, started or bool(self.table[1]))
            started = True
            if not self._add_rows(unit):  # longer than a page: row by row, heading kept
                started = self._rows_one_by_one(device, unit)

    def _add_rows(self, rows: list[str]) -> bool:
        title, placed = self.table
        trial = (title, placed + rows)
        old, self.table = self.table, trial
        if self.fits(self._html()) or self._alone():
            return True
        self.table = old
        return False

    def _page_break(self, device: DeviceSection, continued: bool) -> None:
        self._new_page()
        self.table = (f"{device.title} {CONTINUED}" if continued else device.title, [])

    def _rows_one_by_one(self, device: DeviceSection, unit: list[str]) -> bool:
        pieces = [unit[:2], *([r] for r in unit[2:])]
        for piece in pieces:
            if not self._add_rows(piece):
                self._page_break(device, True)
                self._add_rows(piece)
        return True
