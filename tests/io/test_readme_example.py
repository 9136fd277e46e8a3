"""The examples in sample_site/README.md form a site that loads without a problem."""

import re
from pathlib import Path

from calibra.io import load_site, summarize

README = Path(__file__).resolve().parents[2] / "sample_site" / "README.md"


def test_readme_examples_load(tmp_path):
    text = README.read_text(encoding="utf-8")
    toml = re.findall(r"```toml\n(.*?)```", text, re.DOTALL)
    tables = re.findall(r"```csv\n(.*?)```", text, re.DOTALL)
    assert len(toml) == 1 and len(tables) == 4
    (tmp_path / "network").mkdir()
    (tmp_path / "snapshots").mkdir()
    (tmp_path / "site.toml").write_text(toml[0], encoding="utf-8")
    names = ["network/buses.csv", "network/branches.csv", "points.csv", "snapshots/week.csv"]
    for name, table in zip(names, tables, strict=True):
        (tmp_path / name).write_text(table, encoding="utf-8")
    site = load_site(tmp_path)
    assert site.problems == []
    summary = summarize(site)
    assert (summary["substations"], summary["points"], summary["snapshots"]) == (4, 7, 4)
    assert summary["missing_by_point"]["FNH.TLR1.Q"] == 1
