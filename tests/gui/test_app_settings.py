"""Per-site review settings and the recent-sites list (Qt-free)."""

from __future__ import annotations

import json

import pytest

from calibra.app_settings import (
    MAX_RECENT,
    SETTINGS_FILE,
    RecentSites,
    SettingsError,
    SiteSettings,
    config_dir,
    load_site_settings,
    save_site_settings,
)
from calibra.diagnosis.review import ReviewSettings


def test_defaults_are_the_reviews_own():
    # The application must not change a review by merely opening a site.
    st, review = SiteSettings().review_settings(), ReviewSettings()
    assert st.evidence.normalized_threshold == review.evidence.normalized_threshold
    assert st.evidence.confidence == review.evidence.confidence
    assert st.classify.min_snapshots == review.classify.min_snapshots


def test_no_file_gives_defaults(tmp_path):
    assert load_site_settings(tmp_path) == SiteSettings()


def test_round_trip_and_effect(tmp_path):
    path = save_site_settings(tmp_path, SiteSettings(3.5, 0.995, 240))
    assert path == tmp_path / SETTINGS_FILE
    data = json.loads(path.read_text(encoding="utf-8"))
    assert data["review"] == {"normalized_threshold": 3.5, "confidence": 0.995,
                              "min_snapshots": 240}
    loaded = load_site_settings(tmp_path)
    assert loaded == SiteSettings(3.5, 0.995, 240)
    review = loaded.review_settings()
    assert (review.evidence.normalized_threshold, review.evidence.confidence,
            review.classify.min_snapshots) == (3.5, 0.995, 240)


@pytest.mark.parametrize("text, words", [
    ("{not json", ["not valid JSON", "line 1"]),
    ('{"review": {"threshold": 3}}', ["unknown key", "threshold"]),
    ('{"colour": "blue"}', ["unknown key", "colour"]),
    ('{"review": {"confidence": 1.5}}', ["confidence"]),
    ('{"review": {"min_snapshots": 2.5}}', ["min_snapshots"]),
    ('{"review": {"normalized_threshold": -1}}', ["normalized_threshold"]),
    ('{"format": 9}', ["format"]),
    ("[1, 2]", ["JSON object"]),
])
def test_bad_files_name_file_and_key(tmp_path, text, words):
    (tmp_path / SETTINGS_FILE).write_text(text, encoding="utf-8")
    with pytest.raises(SettingsError) as info:
        load_site_settings(tmp_path)
    message = str(info.value)
    assert SETTINGS_FILE in message
    for word in words:
        assert word in message


def test_bad_values_are_not_saved(tmp_path):
    with pytest.raises(SettingsError):
        save_site_settings(tmp_path, SiteSettings(confidence=0.2))
    assert not (tmp_path / SETTINGS_FILE).exists()


def test_recent_sites_newest_first_without_duplicates(tmp_path):
    recent = RecentSites(tmp_path / "recent.json")
    assert recent.folders() == [] and recent.last() is None
    folders = [tmp_path / f"site{i}" for i in range(MAX_RECENT + 2)]
    for f in folders:
        f.mkdir()
        recent.add(f)
    recent.add(folders[3])
    listed = recent.folders()
    assert listed[0] == folders[3].resolve()
    assert len(listed) == MAX_RECENT and len(set(listed)) == MAX_RECENT
    folders[-1].rmdir()  # a folder that went away is not offered
    assert folders[-1].resolve() not in recent.folders()


def test_unreadable_recent_list_is_empty(tmp_path):
    path = tmp_path / "recent.json"
    path.write_text("{broken", encoding="utf-8")
    assert RecentSites(path).folders() == []


def test_config_dir_follows_environment(tmp_path, monkeypatch):
    monkeypatch.setenv("CALIBRA_CONFIG_DIR", str(tmp_path / "x"))
    assert config_dir() == tmp_path / "x"
    monkeypatch.delenv("CALIBRA_CONFIG_DIR")
    monkeypatch.setenv("XDG_CONFIG_HOME", str(tmp_path / "xdg"))
    assert config_dir() == tmp_path / "xdg" / "calibra"
