"""Which header of a point list holds which of calibra's columns: ``[points.columns]`` of
``site.toml`` first, then the common names of :data:`COLUMN_ALIASES`."""

from __future__ import annotations

from calibra.io.points_config import PointsConfig, fold_header
from calibra.io.problems import ProblemLog
from calibra.io.site_config import SITE_FILE
from calibra.io.text_files import HeaderNames
from calibra.model.points import POINT_COLUMNS

#: Headers recognised for each column without a mapping, compared case- and
#: space-insensitively (``_`` counts as a space). Common practice in utility point lists, no
#: source. The one alias table of calibra; each column's own name is recognised too.
COLUMN_ALIASES: dict[str, tuple[str, ...]] = {
    "tag": ("point", "point name", "name", "tag name", "point tag", "point id"),
    "quantity": ("measurement", "type", "measurement type", "measured quantity"),
    "element": ("branch/bus", "bus/branch", "equipment", "element id"),
    "end": ("branch end", "side"),
    "unit": ("units", "eng unit", "eng units", "engineering unit", "engineering units"),
    "full_scale": ("full scale", "range", "span"),
    "accuracy_pct": ("accuracy", "class", "accuracy %", "accuracy (%)", "accuracy class"),
    "substation": ("station", "substation name"),
    "device": ("transducer", "ied", "meter"),
    "rtu": ("rtu name", "outstation"),
    "channel": ("rtu channel", "ch"),
    "ct_ratio": ("ct", "ct ratio"),
    "vt_ratio": ("vt", "pt", "pt ratio", "vt ratio"),
    "sigma": ("standard deviation", "std dev"),
    "deadband": ("dead band", "report deadband", "reporting deadband", "analog deadband",
                 "deadband value"),
    "resolution": ("reading resolution", "converter resolution", "quantization step",
                   "quantisation step", "resolution step"),
    "note": ("notes", "comment", "comments", "remark", "remarks"),
}

_BY_HEADER: dict[str, str] = {}
for _name, _spellings in COLUMN_ALIASES.items():
    for _spelling in (_name, *_spellings):
        _key = fold_header(_spelling)
        if _BY_HEADER.setdefault(_key, _name) != _name:  # a table error, caught on import
            raise ValueError(f"header alias '{_spelling}' given for two columns")
if set(COLUMN_ALIASES) != {"tag", *POINT_COLUMNS}:
    raise ValueError("COLUMN_ALIASES must list every point-list column")


def point_header_names(
    config: PointsConfig, file: str, header_row: int, log: ProblemLog
) -> HeaderNames:
    """The function that names the point list's header cells (see ``HeaderNames``): a header
    given in ``[points.columns]`` is that column; a header that would otherwise read as a
    column mapped elsewhere is not read (a warning says so); the others by
    :data:`COLUMN_ALIASES`, or lower-cased when unknown. A mapped header that is not in the
    file is an error naming the ``site.toml`` line and key."""

    def names(header: list[str]) -> list[str | None]:
        folded = [fold_header(h) for h in header]
        mapped = {fold_header(h): name for name, h in config.columns.items()}
        for name, wanted in config.columns.items():
            if fold_header(wanted) not in folded:
                log.error(SITE_FILE, config.lines.get(name), name,
                          f"'{wanted}' is not a header of {file}")
        out: list[str | None] = []
        for text, key in zip(header, folded, strict=True):
            if key in mapped:
                out.append(mapped[key])
                continue
            alias = _BY_HEADER.get(key)
            if alias is not None and alias in config.columns:
                log.warning(file, header_row, text,
                            f"not read: [points.columns] in site.toml reads {alias} from "
                            f"'{config.columns[alias]}'")
                out.append(None)
                continue
            out.append(alias if alias is not None else text.strip().lower())
        return out

    return names


def recognised_column(header: str) -> str | None:
    """The column a header reads as without a mapping (its own name or an alias of
    :data:`COLUMN_ALIASES`), None when it is none of them."""
    return _BY_HEADER.get(fold_header(header))
