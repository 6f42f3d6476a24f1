"""event.toml: defaults of DESIGN.md, validation messages naming key and line, overrides."""

from pathlib import Path

import pytest

from debrief.config import from_dict, load_event_config, markdown_table, with_overrides
from debrief.errors import InputError

ROOT = Path(__file__).resolve().parents[1]


def test_defaults_follow_design():
    # DESIGN.md event.toml table; alert figures are common practice (30 min all-clear, 10 km stop).
    cfg = load_event_config(None)
    assert cfg["grouping"] == {
        "max_interval_ms": 500.0, "max_duration_ms": 1000.0, "max_distance_km": 10.0,
        "max_strokes": 15, "same_polarity": False, "ground_contact_km": 1.0, "likely_ic_below_ka": 15.0,
    }
    assert cfg.get("ellipse_confidence") == 0.5
    assert cfg["alerts"]["stop_km"] == 10.0 and cfg["alerts"]["all_clear_min"] == 30.0
    assert cfg["alerts"]["warn_km"] is None
    assert cfg["lines"]["return_stroke_speed_m_s"] == 1.2e8  # IEEE Std 1410 default
    assert cfg.get("default_uncertainty_km") is None and cfg.get("flash_detection_efficiency") is None


def test_event_folder(tmp_path):
    (tmp_path / "event.toml").write_text(
        'name = "Test storm"\ntime_zone = "Europe/Vienna"\nstart = 2026-07-14T19:00:00Z\n'
        "[grouping]\nmax_distance_km = 5\n", encoding="utf-8")
    cfg = load_event_config(tmp_path)
    assert cfg.name == "Test storm" and cfg.time_zone == "Europe/Vienna"
    assert cfg.get("start") == "2026-07-14T19:00:00+00:00"
    assert cfg["grouping"]["max_distance_km"] == 5.0 and isinstance(cfg["grouping"]["max_distance_km"], float)
    assert cfg.is_given("grouping", "max_distance_km") and not cfg.is_given("grouping", "max_interval_ms")
    assert cfg.path("strokes") == tmp_path / "strokes.csv"


def test_folder_without_toml_takes_defaults_and_folder_name(tmp_path):
    cfg = load_event_config(tmp_path)
    assert cfg.name == tmp_path.name


@pytest.mark.parametrize("text,expect", [
    ("[alerts]\nstop_kn = 3\n", "line 2: unknown key 'alerts.stop_kn' (did you mean 'stop_km'?)"),
    ("name = 'x'\n[alerts]\nstop_km = -3\n", "line 3, key 'alerts.stop_km': must be > 0.0"),
    ("ellipse_confidence = 1.5\n", "line 1, key 'ellipse_confidence': must be <= 1.0"),
    ("time_zone = 'Mars/Olympus'\n", "unknown time zone 'Mars/Olympus'"),
    ("[grouping]\nmax_strokes = 2.5\n", "expected a whole number"),
    ("current_unit = 'mA'\n", "must be one of 'kA', 'A'"),
    ("[grouping]\nsame_polarity = 1\n", "expected a true/false"),
    ("name = \n", "not valid TOML"),
])
def test_bad_settings_name_key_and_line(tmp_path, text, expect):
    (tmp_path / "event.toml").write_text(text, encoding="utf-8")
    with pytest.raises(InputError) as e:
        load_event_config(tmp_path)
    assert expect in str(e.value)
    assert "event.toml" in str(e.value)


def test_missing_folder():
    with pytest.raises(InputError, match="event folder not found"):
        load_event_config("/nonexistent/folder")


def test_overrides_win_and_none_is_ignored():
    cfg = from_dict({"alerts": {"stop_km": 8}})
    out = with_overrides(cfg, {"alerts.stop_km": 6, "alerts.warn_km": None, "time_zone": "UTC"})
    assert out["alerts"]["stop_km"] == 6.0 and out["alerts"]["warn_km"] is None
    assert out.time_zone == "UTC" and cfg["alerts"]["stop_km"] == 8.0
    with pytest.raises(InputError, match="unknown setting"):
        with_overrides(cfg, {"alerts.stop": 1})


def test_docs_table_is_current():
    doc = (ROOT / "docs" / "event-toml.md").read_text(encoding="utf-8")
    assert markdown_table() in doc, "regenerate docs/event-toml.md: python -m debrief.config"
