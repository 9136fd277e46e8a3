"""An import's plan and outcome in lines for people: the command line prints them; the
desktop shows the same data (:class:`~calibra.io.site_import.ImportPlan`) in its own table."""

from __future__ import annotations

from collections import Counter

import pandas as pd

from calibra.io.import_history import ExportKind
from calibra.io.long_align import duration_text
from calibra.io.site_import import ImportPlan
from calibra.model.times import for_people

#: How many tags a list names before it only counts the rest.
NAMED = 8


def _some(items: list[str]) -> str:
    shown = ", ".join(items[:NAMED])
    return shown + (f" and {len(items) - NAMED} more" if len(items) > NAMED else "")


def mapping_rows(plan: ImportPlan) -> list[list[str]]:
    """The mapping as table rows: calibra's column, the file's header, where it is, how it
    was found, the first values."""
    return [[c.column, c.header, c.where, str(c.placement),
             " | ".join(v if v else "(empty)" for v in c.samples)] for c in plan.mapping.matches]


def mapping_lines(plan: ImportPlan) -> list[str]:
    """Each calibra column ← the file's header (where, how placed), with the first values;
    then the headers no column takes."""
    m = plan.mapping
    lines = [f"point list: {m.file}, {m.rows} rows; calibra's column <- the file's header "
             "(column, how found): first values"]
    width = max(len(c.column) for c in m.matches)
    for column, header, where, how, values in mapping_rows(plan):
        lines.append(f"  {column:<{width}} <- '{header}' ({where}, {how}): {values}")
    if m.unplaced:
        lines.append("  headers not placed (not read): " + ", ".join(f"'{h}'" for h in m.unplaced))
    return lines


def history_lines(plan: ImportPlan) -> list[str]:
    """The exports: kinds, samples, tags, time range, interval, sparse points, tag counts."""
    h, zone = plan.history, plan.request.fields.timezone
    kinds = Counter(f.kind for f in h.files)
    rows = sum(f.rows for f in h.files)
    lines = [f"historian exports: {len(h.files)} file(s), "
             + ", ".join(f"{kind}: {n}" for kind, n in kinds.items())
             + f"; {rows:,} timed rows, {len(h.tags)} tags"]
    for f in h.files:
        what = "samples" if f.kind is ExportKind.LONG else "snapshots"
        quality = f", quality column '{f.quality}'" if f.quality else ""
        span = (f" from {for_people(f.first, zone)} to {for_people(f.last, zone)}"
                if f.first is not None else "")
        lines.append(f"  {f.path.name}: {f.kind}, {f.rows:,} {what}{quality}{span}")
    if h.first is not None:
        lines.append(f"  time range: {for_people(h.first, zone)} to {for_people(h.last, zone)}")
    if h.interval is not None:
        lines.append(f"  snapshot interval: {duration_text(h.interval)} ({h.interval_note})")
        age = plan.request.fields.max_age or h.interval
        if h.sparse:
            widest = max(h.sparse.values())
            held = "" if age >= widest else (
                f"; a sample serves snapshots for {duration_text(age)} only, so these points "
                "are missing between samples: give a longer maximum age (e.g. the historian's "
                "longest storage interval)")
            lines.append(f"  stored less often than the interval (report by exception?): "
                         f"{len(h.sparse)} tags, median spacing up to {_spacing(widest)}"
                         f" ({_some(list(h.sparse))}){held}")
    not_listed, not_exported = plan.export_tags_not_listed(), plan.listed_tags_not_exported()
    lines.append(f"  export tags not in the point list: {len(not_listed)}"
                 + (f" ({_some(not_listed)})" if not_listed else ""))
    lines.append(f"  points of the point list without samples in the exports: "
                 f"{len(not_exported)}" + (f" ({_some(not_exported)})" if not_exported else ""))
    return lines


def _spacing(t: pd.Timedelta) -> str:
    return duration_text(t) if t.total_seconds() % 60 == 0 else f"{t.total_seconds():g} s"


def network_lines(plan: ImportPlan) -> list[str]:
    n = plan.network
    base = n.base_mva if n.base_mva is not None else plan.base_mva
    names = ", ".join(str(src) for src, dest in plan.copies if dest.startswith("network/"))
    lines = [f"network: {n.format} ({names}): {n.buses} buses, {n.branches} branches, "
             f"base {base:g} MVA"]
    unknown = plan.unknown_elements()
    lines.append(f"  point-list elements that are not a bus or branch of it: {len(unknown)}"
                 + (f" ({_some(unknown)})" if unknown else ""))
    return lines


def overview_lines(plan: ImportPlan) -> list[str]:
    """The exports, the network and the choices made for the user."""
    return (history_lines(plan) + network_lines(plan)
            + [f"note: {note}" for note in plan.notes])


def plan_lines(plan: ImportPlan) -> list[str]:
    """The whole preview: mapping, exports, network, the choices made, the folder's files."""
    lines = mapping_lines(plan) + overview_lines(plan)
    lines.append(f"folder {plan.request.target}: site.toml, "
                 + ", ".join(dest for _, dest in plan.copies if not dest.startswith("snapshots"))
                 + f", snapshots/ ({len(plan.request.history)} files)")
    return lines
