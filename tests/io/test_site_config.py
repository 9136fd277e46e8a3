"""Problems in site.toml."""

import pytest

from calibra.io import load_site
from calibra.model.site import SiteLoadError
from tests.io.site_builder import SITE_TOML, find, problems_of

SITE = "site.toml"


def test_site_settings_are_read(files, tmp_path):
    site = load_site(files.write(tmp_path))
    assert site.name == "Fenwick Hollow district"
    assert site.timezone == "Europe/Berlin"
    assert site.network.base_mva == 100.0 and site.network.frequency_hz == 50.0


def test_bad_timezone(files, tmp_path):
    files.toml = SITE_TOML.replace("Europe/Berlin", "Europe/Fenwick")
    p = find(problems_of(files.write(tmp_path)), SITE, 5, "timezone")
    assert "'Europe/Fenwick' is not an IANA timezone name" in p.message


def test_unknown_reference_bus(files, tmp_path):
    files.toml = SITE_TOML.replace('"FNH132"', '"FNH400"')
    p = find(problems_of(files.write(tmp_path)), SITE, None, "reference_bus")
    assert p.message == "unknown bus 'FNH400'"


def test_reference_bus_defaults_to_the_first_bus(files, tmp_path):
    files.toml = SITE_TOML.replace('reference_bus = "FNH132"\n', "")
    files.buses.rows = files.buses.rows[1:] + files.buses.rows[:1]
    site = load_site(files.write(tmp_path))
    assert site.network.reference_bus == "TLR132"


@pytest.mark.parametrize("key", ["name", "frequency_hz", "timezone", "base_mva"])
def test_missing_key(files, tmp_path, key):
    files.toml = "\n".join(ln for ln in SITE_TOML.splitlines() if not ln.startswith(key))
    p = find(problems_of(files.write(tmp_path)), SITE, None, key)
    assert p.message == "required key is missing from [site]"


@pytest.mark.parametrize("text,row", [('base_mva = "100"', 3), ("base_mva = -100.0", 3),
                                      ("base_mva = true", 3)])
def test_base_must_be_a_positive_number(files, tmp_path, text, row):
    files.toml = SITE_TOML.replace("base_mva = 100.0", text)
    p = find(problems_of(files.write(tmp_path)), SITE, row, "base_mva")
    assert "must be a number greater than zero" in p.message


def test_toml_syntax_error_names_the_line(files, tmp_path):
    files.toml = SITE_TOML.replace("frequency_hz = 50.0", "frequency_hz = ")
    p = find(problems_of(files.write(tmp_path)), SITE, 4, None)
    assert p.message.startswith("not valid TOML")


def test_missing_site_table(files, tmp_path):
    files.toml = SITE_TOML.replace("[site]", "[plant]")
    problems = problems_of(files.write(tmp_path))
    assert find(problems, SITE, None, None).message == "the [site] table is missing"
    assert find(problems, SITE, 1, "plant", "warning").message == "unknown entry; ignored"


def test_unknown_key_is_a_warning(files, tmp_path):
    files.toml = SITE_TOML + 'operator = "Fenwick Grid"\n'
    site = load_site(files.write(tmp_path))
    assert find(site.problems, SITE, 7, "operator", "warning").message.startswith("unknown key")


def test_missing_site_file_and_folder(files, tmp_path):
    files.toml = None
    assert find(problems_of(files.write(tmp_path)), SITE, None, None).message == "file not found"
    with pytest.raises(SiteLoadError) as info:
        load_site(tmp_path / "nowhere")
    assert "not found" in info.value.problems[0].message
