"""File names from substation names never leave the output folder (common practice, no
source; Windows reserved device names from the Win32 file-naming rules [M])."""

import pytest

from calibra.reports import inside, safe_file_stem, unique_file_names, write_work_orders_html

HOSTILE = [
    "../../etc/passwd", "/etc/cron.d/x", "C:\\Windows\\System32", "..", ".", "", "   ",
    "CON", "nul.txt", "com1", 'a<b>c:d"e|f?g*h', "tab\there\nnewline", ".hidden",
    "x" * 500, "\x00null", "Ölmühle Süd", "Ash & Vale <North>",
]


@pytest.mark.parametrize("name", HOSTILE)
def test_stem_is_one_plain_name(name):
    stem = safe_file_stem(name)
    assert stem and len(stem) <= 80
    assert not set(stem) & set('/\\<>:"|?*\t\n\x00')
    assert not stem.startswith(".") and stem not in ("..", ".")
    assert stem.split(".")[0].upper() not in {"CON", "NUL", "COM1", "PRN", "AUX"}


def test_readable_names_stay_readable():
    assert safe_file_stem("Ölmühle Süd") == "Ölmühle Süd"
    assert safe_file_stem("Marlow Cross 132kV") == "Marlow Cross 132kV"
    assert safe_file_stem("../../etc/passwd") == "etc_passwd"
    assert safe_file_stem("CON") == "_CON"


def test_names_that_reduce_alike_stay_distinct():
    names = unique_file_names(["A/B", "A_B", "a_b", "A:B"], ".html")
    assert len({n.lower() for n in names.values()}) == 4


def test_written_pages_stay_in_the_folder(tmp_path):
    out = tmp_path / "orders"
    pages = {name: f"<p>{i}</p>" for i, name in enumerate(HOSTILE)}
    written = write_work_orders_html(pages, out)
    assert set(written) == set(pages)
    for path in written.values():
        assert path.parent == out.resolve() and path.exists()
    assert sorted(p.name for p in out.iterdir()) == sorted(p.name for p in written.values())
    assert list(tmp_path.iterdir()) == [out], "nothing written outside the folder"


def test_inside_refuses_escaping_names(tmp_path):
    with pytest.raises(ValueError, match="would leave the folder"):
        inside(tmp_path, "../x.html")
    with pytest.raises(ValueError, match="would leave the folder"):
        inside(tmp_path, "/etc/x.html")
