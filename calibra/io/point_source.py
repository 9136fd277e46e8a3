"""Finding and reading the point list of a site folder: ``points.csv`` or one spreadsheet
(``points.xlsx``, ``points.xlsm``, ``points.ods``), as the same table of text cells."""

from __future__ import annotations

from pathlib import Path

from calibra.io.point_columns import point_header_names
from calibra.io.points_config import PointsConfig
from calibra.io.problems import ProblemLog
from calibra.io.site_config import SITE_FILE
from calibra.io.spreadsheet import SPREADSHEET_SUFFIXES, read_sheet
from calibra.io.text_files import Dialect, RawTable, read_small_table, table_from_records
from calibra.model.points import OPTIONAL_POINT_COLUMNS, REQUIRED_POINT_COLUMNS

POINTS_FILE = "points.csv"
#: Every name a point list may have in the site folder (one of them, never two).
POINT_LIST_FILES = (POINTS_FILE, *(f"points{suffix}" for suffix in SPREADSHEET_SUFFIXES))


def read_point_table(folder: Path, config: PointsConfig, log: ProblemLog) -> RawTable | None:
    """The point list's cells with calibra's column names (headers mapped by ``config`` or
    recognised by their common names); None, with errors logged, when there is none to read
    or more than one file."""
    found = [name for name in POINT_LIST_FILES if (folder / name).is_file()]
    if len(found) > 1:
        log.error(found[0], None, None, "the folder has several point lists ("
                  + ", ".join(found) + "); keep one")
        return None
    required = ["tag"] + REQUIRED_POINT_COLUMNS
    if not found:
        others = sorted(p.name for p in folder.glob("points.*") if p.is_file())
        if others:
            log.error(others[0], None, None, "calibra does not read a point list in this format; "
                      "save it as " + ", ".join(POINT_LIST_FILES))
            return None
    if not found or found[0] == POINTS_FILE:
        if config.sheet is not None:
            log.warning(SITE_FILE, config.lines.get("sheet"), "sheet",
                        f"the point list is {POINTS_FILE}, which has no sheets; ignored")
        return read_small_table(folder / POINTS_FILE, POINTS_FILE, log, required,
                                OPTIONAL_POINT_COLUMNS,
                                names=point_header_names(config, POINTS_FILE, 1, log))
    rel = found[0]
    sheet = read_sheet(folder / rel, rel, config.sheet, log,
                       (SITE_FILE, config.lines.get("sheet"), "sheet"))
    if sheet is None:
        return None
    names = point_header_names(config, sheet.file, sheet.header_row, log)
    return table_from_records(sheet.file, sheet.header, sheet.header_row, sheet.body,
                              Dialect(), log, required, OPTIONAL_POINT_COLUMNS,
                              names=names, letters=sheet.letters)
