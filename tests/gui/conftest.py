"""GUI test fixtures: an offscreen Qt, a small generated site, and the main window on it."""

from __future__ import annotations

import os

os.environ["QT_QPA_PLATFORM"] = "offscreen"  # before anything imports Qt

import shutil  # noqa: E402
from pathlib import Path  # noqa: E402

import pandas as pd  # noqa: E402
import pytest  # noqa: E402

from calibra.app_settings import RecentSites  # noqa: E402
from calibra.gui.qt_compat import protect_singletons  # noqa: E402
from calibra.io import load_site  # noqa: E402
from calibra.review_run import ReviewRun, run_review  # noqa: E402

protect_singletons()  # before the many Qt calls of the suite (see calibra/gui/qt_compat.py)

#: The seeded fault of the small site: CT polarity reversed on both power channels of one
#: device (the simulator negates the values it writes).
REVERSED_TAGS = ("BRN.110.MRG1.MW", "BRN.110.MRG1.MVAR")
#: The other seeded fault some tests use: the P and Q inputs of one device swapped.
MISMAPPED_TAGS = ("NRC.110.MRG1.MW", "NRC.110.MRG1.MVAR")
ORIGINAL_PERIODS = 720  #: twelve hours of one-minute snapshots: a review takes a few seconds


def _small_site(folder: Path, mismapped: bool = False, options=None) -> None:
    """The invented sample grid for twelve hours with one seeded fault: a reversed CT, or with
    ``mismapped`` the P and Q inputs of device NRC.110.MRG1 swapped (``options``: the
    simulator's telemetry options, e.g. an RTU clock error)."""
    from calibra.simulate import sample_site as ss
    from calibra.simulate.telemetry import simulate_site
    from calibra.simulate.writer import write_site

    case = ss.tarrowmere_case()
    points = ss.sample_points(case, 7)
    wanted = set(MISMAPPED_TAGS if mismapped else REVERSED_TAGS)
    faults = [f for f in ss.sample_faults(points) if set(f.tags) == wanted]
    assert len(faults) == 1
    result = simulate_site(case, points, start=ss.START_LOCAL, periods=ORIGINAL_PERIODS,
                           timezone=ss.TIMEZONE, seed=7, faults=faults, outages=None,
                           name="Small test grid", mix=ss._mix(case.network),
                           wind_mw=ss.WIND_MW, options=options)
    write_site(result.site, folder)


@pytest.fixture(scope="session")
def site_template(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("template") / "site"
    _small_site(folder)
    return folder


@pytest.fixture
def site_folder(site_template, tmp_path) -> Path:
    """A fresh copy of the small site (its own ledger and settings)."""
    folder = tmp_path / "site"
    shutil.copytree(site_template, folder)
    return folder


@pytest.fixture(scope="session")
def reviewed(site_template) -> tuple:
    """(site, run) of one review of the small site without a ledger (Qt-free tests)."""
    site = load_site(site_template)
    run: ReviewRun = run_review(site)
    return site, run


@pytest.fixture(scope="session")
def mismapped_reviewed(tmp_path_factory) -> tuple:
    """(site, run) of the small site with P and Q of one device swapped, reviewed."""
    folder = tmp_path_factory.mktemp("mismapped") / "site"
    _small_site(folder, mismapped=True)
    site = load_site(folder)
    return site, run_review(site)


@pytest.fixture(autouse=True)
def _private_config(tmp_path, monkeypatch):
    """Recent sites go to a temporary folder, never to the user's configuration."""
    monkeypatch.setenv("CALIBRA_CONFIG_DIR", str(tmp_path / "config"))


@pytest.fixture
def window(qtbot, tmp_path):
    """The main window, shown offscreen, not reviewing on open."""
    from calibra.gui.qt_app import application
    from calibra.gui.qt_main import MainWindow

    application()
    w = MainWindow(recent=RecentSites(tmp_path / "recent.json"), review_on_open=False)
    qtbot.addWidget(w)
    w.show()
    yield w
    w.close()


def open_and_wait(qtbot, window, folder: Path, timeout: int = 30000) -> None:
    """Open a site and wait until loading has ended (successfully or not)."""
    with qtbot.waitSignal(window.jobs.idle, timeout=timeout):
        window.open_site(folder)


def review_and_wait(qtbot, window, timeout: int = 90000) -> None:
    """Run the review and wait for its result."""
    with qtbot.waitSignals([window.jobs.finished, window.jobs.idle], timeout=timeout):
        window.start_review()


def finite_equal(a, b, rtol: float = 1e-6) -> bool:
    """Same NaN pattern and equal finite values."""
    import numpy as np

    a, b = np.asarray(a, float), np.asarray(b, float)
    if a.shape != b.shape or not (np.isnan(a) == np.isnan(b)).all():
        return False
    ok = ~np.isnan(a)
    return bool(np.allclose(a[ok], b[ok], rtol=rtol, atol=1e-6))


def raw_values(folder: Path, tag: str, index: pd.DatetimeIndex):
    """A point's values as written in the site's snapshot files."""
    return load_site(folder).snapshots[tag].reindex(index).to_numpy(float)
