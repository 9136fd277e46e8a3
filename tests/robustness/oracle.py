"""What every load of a site folder must satisfy, whatever the folder holds.

- ``load_site`` returns a :class:`Site` or raises :class:`SiteLoadError`; nothing else.
- Every problem is one line that names its file (row and column where they apply), with a
  row that exists in that file.
- A loaded site is consistent: UTC snapshot times in order without repeats, one float column
  per tag, finite values, statuses 0/1, every reference resolved, usable network numbers.
- A mutation's own expectations (see :mod:`tests.robustness.mutations`) hold.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd

from calibra.io import load_site
from calibra.model.points import QUANTITIES
from calibra.model.site import LoadProblem, Site, SiteLoadError
from tests.robustness.mutations import ANY, Mutation, Place

FOLDER_LEVEL = {".", "network", "snapshots"}


def load(root: Path, **options) -> tuple[Site | None, list[LoadProblem]]:
    """The site (None when unusable) and every problem; any other exception fails the test."""
    try:
        site = load_site(root, **options)
    except SiteLoadError as exc:
        return None, exc.problems
    return site, site.problems


def _lines(data: bytes) -> int:
    """Lines of a file, whatever its line ends (LF, CR LF or CR)."""
    return len(re.findall(rb"\r\n|\r|\n", data)) + 1


def check_problems(problems: list[LoadProblem], files: dict[str, bytes], loaded: bool) -> None:
    """Each problem is one located line; an unusable site has at least one error."""
    for p in problems:
        text = str(p)
        assert "\n" not in text and "\r" not in text, f"problem over several lines: {text!r}"
        assert p.severity in ("error", "warning") and p.count >= 1, text
        assert p.message.strip(), text
        assert p.file and (p.file in files or p.file in FOLDER_LEVEL
                           or p.file.split("/")[0] in ("network", "snapshots")
                           or p.file in ("site.toml", "points.csv")), text
        assert text.startswith(f"{p.severity}: {p.file}"), text
        if p.row is not None:
            assert isinstance(p.row, int) and p.row >= 1, text
            assert f"row {p.row}" in text, text
            data = files.get(p.file)
            if data is not None and p.file.endswith((".csv", ".toml")):
                assert p.row <= _lines(data), f"{text}: the file has {_lines(data)} lines"
        if p.column is not None:
            assert isinstance(p.column, str) and f"column '{p.column}'" in text, text
    if not loaded:
        assert any(p.severity == "error" for p in problems), "unusable without an error"
    else:
        assert all(p.severity == "warning" for p in problems)


def check_site(site: Site) -> None:
    """The loaded site is consistent, whatever the folder held."""
    net, points, snaps = site.network, site.points, site.snapshots
    idx = snaps.index
    assert isinstance(idx, pd.DatetimeIndex) and str(idx.tz) == "UTC"
    assert idx.is_monotonic_increasing and idx.is_unique
    assert list(snaps.columns) == list(points.index)
    assert all(dtype == np.float64 for dtype in snaps.dtypes)
    values = snaps.to_numpy()
    assert not np.isinf(values).any()
    quantity = points["quantity"].to_numpy(object)
    status = values[:, quantity == "branch_status"]
    assert (np.isnan(status) | (status == 0.0) | (status == 1.0)).all()
    buses, branches = net.buses, net.branches
    bus_ids, branch_ids = set(buses.index), set(branches.index)
    assert len(bus_ids) == len(buses) and len(branch_ids) == len(branches)
    assert len(set(points.index)) == len(points) and "" not in bus_ids
    assert "" not in set(points.index)
    kv = buses["kv"].to_numpy(float)
    assert np.isfinite(kv).all() and (kv > 0).all()
    assert np.isfinite(buses[["g_shunt_mw", "b_shunt_mvar"]].to_numpy(float)).all()
    numbers = branches[["r", "x", "b", "tap", "shift_deg"]].to_numpy(float)
    assert np.isfinite(numbers).all() and (numbers[:, 3] > 0).all()
    assert ((numbers[:, 0] != 0) | (numbers[:, 1] != 0)).all()
    ends = list(zip(branches["from_bus"], branches["to_bus"], strict=True))
    assert all(f in bus_ids and t in bus_ids and f != t for f, t in ends)
    assert net.reference_bus in bus_ids
    for q, element, unit, end in zip(quantity, points["element"], points["unit"],
                                     points["end"], strict=True):
        spec = QUANTITIES[q]
        assert element in (branch_ids if spec["element"] == "branch" else bus_ids)
        assert unit in spec["units"] and (end != "") == bool(spec["end"])
    scales = points[["full_scale", "accuracy_pct"]].to_numpy(float)
    assert (scales[quantity != "branch_status"] > 0).all()
    status_scales = scales[quantity == "branch_status"]  # empty or 0 in the file: NaN
    assert (np.isnan(status_scales) | (status_scales > 0)).all()
    assert (points["device"][quantity != "branch_status"] != "").all()
    sigma = points["sigma"].to_numpy(float)
    assert (np.isnan(sigma) | (sigma > 0)).all()


def _matches(p: LoadProblem, place: Place) -> bool:
    file, row, column = place
    return ((file == ANY or p.file == file) and (row == ANY or p.row == row)
            and (column == ANY or p.column == column))


def _located(problems: list[LoadProblem], place: Place) -> bool:
    return any(_matches(p, place) for p in problems)


def check_expectations(m: Mutation, site: Site | None, problems: list[LoadProblem]) -> None:
    """The mutation's own expectations."""
    listing = "\n".join(str(p) for p in problems)
    if m.must_fail:
        assert site is None, f"{m.label}: loaded, but must not:\n{listing}"
    if m.must_load:
        assert site is not None, f"{m.label}: not loaded:\n{listing}"
    for place in m.must_report:
        assert _located(problems, place), f"{m.label}: nothing reported at {place}:\n{listing}"
    if m.unless is not None:
        place, as_written = m.unless
        if site is None:
            file, row, _ = place
            where = (ANY, ANY, ANY) if m.failure_anywhere else (file, row, ANY)
            errors = [p for p in problems if p.severity == "error"]
            assert _located(errors, where), f"{m.label}: no error at {where}:\n{listing}"
        elif not as_written(site):
            assert _located(problems, place), (
                f"{m.label}: loaded differently from the file and nothing reported at "
                f"{place}:\n{listing}")
    if site is not None and m.expect is not None:
        m.expect(site)
