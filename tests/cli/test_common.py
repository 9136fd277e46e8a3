"""What the subcommands share: the period options read by the one time parser, in the site's
zone, with the option named when a time is wrong."""

import argparse

import pandas as pd
import pytest

from calibra.cli import main
from calibra.cli.common import UsageError, read_period, site_timezone


def _period(start=None, end=None) -> argparse.Namespace:
    return argparse.Namespace(start=start, end=end)


def test_period_options_are_read_in_the_sites_zone(files, tmp_path):
    root = files.write(tmp_path)  # Europe/Berlin: UTC+1 in March (tz database)
    assert site_timezone(root) == "Europe/Berlin"
    start, end = read_period(root, _period("2024-03-04 10:01", "2024-03-04T09:02Z"))
    assert start == pd.Timestamp("2024-03-04 09:01", tz="UTC")
    assert end == pd.Timestamp("2024-03-04 09:02", tz="UTC")
    assert read_period(root, _period()) == (None, None)


@pytest.mark.parametrize(("start", "end", "message"), [
    ("soon", None, "--from: not a time: 'soon'"),
    (None, "2024-03-32", "--to: not a time: '2024-03-32'"),
    ("2024-03-31 02:30", None, "--from: '2024-03-31 02:30' is not a single moment"),
    # 11:00 in Berlin is 10:00 UTC: later than 09:30 UTC although it is written earlier.
    ("2024-03-04 11:00", "2024-03-04T09:30Z",
     "--from 2024-03-04 11:00 is later than --to 2024-03-04T09:30Z"),
])
def test_a_wrong_period_is_a_usage_error_naming_the_option(files, tmp_path, start, end, message):
    with pytest.raises(UsageError, match="^" + message.replace("(", r"\(")):
        read_period(files.write(tmp_path), _period(start, end))


def test_the_commands_read_their_period_in_the_sites_zone(files, tmp_path, capsys):
    root = files.write(tmp_path)
    assert main(["estimate", str(root), "--from", "2024-03-04 10:01", "--worst", "0"]) == 0
    assert "estimated 3 snapshots" in capsys.readouterr().out
    assert main(["review", str(root), "--to", "yesterday", "--no-ledger"]) == 2
    assert capsys.readouterr().err.startswith("calibra review: --to: not a time: 'yesterday'")


def test_a_period_on_a_site_without_a_usable_configuration_reports_the_site(files, tmp_path,
                                                                            capsys):
    files.toml = files.toml.replace('"Europe/Berlin"', '"Europe/Atlantis"')
    root = files.write(tmp_path)
    assert main(["estimate", str(root), "--from", "2024-03-04 10:01"]) == 1
    out = capsys.readouterr().out
    assert "Europe/Atlantis" in out and "result: not usable" in out
