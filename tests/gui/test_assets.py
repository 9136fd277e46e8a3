"""The application icon is found from a clone and from an installed copy."""

from __future__ import annotations

import tomllib
from pathlib import Path

from calibra.gui import qt_style

ROOT = Path(__file__).resolve().parents[2]


def test_the_icon_loads_from_the_source_tree(qapp):
    assert qt_style.asset_dir() == ROOT / "assets"
    icon = qt_style.app_icon()
    assert not icon.isNull()
    assert not icon.pixmap(64, 64).isNull()


def test_an_installed_copy_carries_every_image_of_assets():
    """pyproject's data-files put each image of assets/ where qt_style looks in an installed
    copy (<prefix>/share/calibra/assets); a new image must be listed there too."""
    config = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    listed = config["tool"]["setuptools"]["data-files"]["share/calibra/assets"]
    images = sorted(f"assets/{p.name}" for p in (ROOT / "assets").iterdir()
                    if p.suffix in (".svg", ".png"))
    assert sorted(listed) == images
    assert qt_style.ASSET_DIRS[1].parts[-3:] == ("share", "calibra", "assets")
