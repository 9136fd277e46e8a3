"""The one parser of typed times (``read_local``): naive times in the site's zone, the option
named in every error."""

import pandas as pd
import pytest

from calibra.model.times import read_local

UTC = "UTC"


def test_naive_times_are_in_the_sites_zone_and_come_back_in_utc():
    # Europe/Oslo is UTC+1 in March before the change to summer time (tz database).
    assert read_local("2027-03-01 06:00", "Europe/Oslo") == pd.Timestamp("2027-03-01 05:00",
                                                                          tz=UTC)
    assert read_local("2027-03-01T06:00Z", "Europe/Oslo") == pd.Timestamp("2027-03-01 06:00",
                                                                           tz=UTC)
    assert read_local(pd.Timestamp("2027-03-01 06:00", tz=UTC), "Europe/Oslo") == \
        pd.Timestamp("2027-03-01 06:00", tz=UTC)


@pytest.mark.parametrize("text", ["tomorrow", "", None, "2027-13-01"])
def test_a_text_that_is_not_a_time_is_refused_with_the_option_named(text):
    with pytest.raises(ValueError, match=r"^--at: not a time: .*Europe/Oslo"):
        read_local(text, "Europe/Oslo", "--at")


@pytest.mark.parametrize("text", ["2027-03-28 02:30", "2027-10-31 02:30"])
def test_a_local_time_that_daylight_saving_skips_or_repeats_is_refused(text):
    # 2027-03-28 02:00 → 03:00 and 2027-10-31 03:00 → 02:00 in Europe/Oslo (tz database).
    with pytest.raises(ValueError, match=r"^--from: .* is not a single moment in Europe/Oslo"):
        read_local(text, "Europe/Oslo", "--from")
    assert read_local(f"{text}+01:00", "Europe/Oslo") == pd.Timestamp(text, tz="Etc/GMT-1")
