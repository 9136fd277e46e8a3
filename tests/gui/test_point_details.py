"""The selected point's details show the deadband and resolution the point list states."""

from __future__ import annotations

from calibra.gui.qt_details import point_html
from calibra.io import load_site
from tests.io.site_builder import SiteFiles


def test_point_details_show_the_stated_deadband_and_resolution(tmp_path):
    files = SiteFiles()
    files.points.add_column("deadband").add_column("resolution")
    files.points.set(2, "deadband", "0.3%").set(2, "resolution", "0.05")  # 200 MW full scale
    site = load_site(files.write(tmp_path))
    html = point_html(site, "FNH.TLR1.P", None, site.timezone)
    assert "Deadband (stated)</td><td>0.6</td>" in html
    assert "Resolution (stated)</td><td>0.05</td>" in html
    # a point that leaves them to the data shows no such rows
    assert "Deadband" not in point_html(site, "FNH.TLR1.Q", None, site.timezone)
