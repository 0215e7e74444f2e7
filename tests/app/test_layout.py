"""Touch targets and text sizes on every screen (>= 48 dp targets, >= 18 sp text: issue 4's rule,
common practice for gloved touch), the soft keyboard never covering the focused field, and on_pause
saving before the debounce has fired."""

from __future__ import annotations

import pytest

from core.store import DeviceStore
from tests.app.conftest import ARTIFACTS, run_scenario, seed_sites
from tests.app.test_trip_flow import run_until_ready_then_kill

pytestmark = pytest.mark.app


@pytest.mark.parametrize("size,folder", [("1200x780", "landscape"), ("600x780", "portrait")])
def test_targets_text_and_keyboard(tmp_path, size, folder):
    seed_sites(tmp_path / "data")
    notes = run_scenario("sizes", tmp_path / "data", tmp_path, size=size, artifacts=ARTIFACTS / folder)
    assert notes["checked"] > 40
    assert notes["small_targets"] == []
    assert notes["small_text"] == []
    assert notes["field_bottom_y"] >= 320 - 1  # above the 320 px keyboard
    assert notes["field_top_y"] <= notes["scroll_top_y"] + 1


def test_on_pause_saves_before_the_debounce(tmp_path):
    seed_sites(tmp_path / "data")
    notes = run_until_ready_then_kill("pause_and_hang", tmp_path)
    stop = DeviceStore.open(tmp_path / "data").load_trip(notes["trip_id"]).stops[0]
    assert stop.id == notes["stop_id"] and stop.site_id == "LK-03"
    assert (stop.temp.text, stop.pressure.text, stop.do.text) == ("15,5 °C", "941 hPa", "8,4 mg/L")


def test_settings_reach_the_store_and_new_stops(tmp_path):
    import json

    seed_sites(tmp_path / "data")
    notes = run_scenario("settings_change", tmp_path / "data", tmp_path)
    assert notes["message"].startswith("✓")
    assert "Calibration tolerance" in notes["refused"] and "up to 5 mg/L" in notes["refused"]  # ProgramSettings bound
    st = DeviceStore.open(tmp_path / "data").settings()
    assert st.calibration_tolerance_mg_l == pytest.approx(0.3)
    prefs = json.loads((tmp_path / "data" / "app-prefs.json").read_text())
    assert prefs["temp_unit"] == "F" and prefs["sync_target"] == "/mnt/hub"
    assert notes["stop_temp_unit"] == "F"
    assert notes["after_back"] == "trips"  # back from a stop: the trips list, app still open


def test_meter_percent_basis_is_a_program_setting_on_the_settings_screen(tmp_path):
    """The basis chosen on the settings screen is stored in the program settings (which sync carries as
    program/settings) and is where a new trip's start screen begins (team science reference §10)."""
    seed_sites(tmp_path / "data")
    notes = run_scenario(
        "settings_percent_basis", tmp_path / "data", tmp_path, size="1280x800", artifacts=ARTIFACTS / "settings"
    )
    assert (notes["basis_before"], notes["basis_chosen"]) == ("local", "sea-level")
    assert notes["message"].startswith("✓"), notes["message"]
    assert DeviceStore.open(tmp_path / "data").settings().percent_basis == "sea-level"
    assert notes["start_basis"] == "sea-level" and notes["start_toggle"] == "down"
    assert notes["basis_shown_again"] == "sea-level"


@pytest.mark.parametrize("size,folder", [("1200x780", "landscape"), ("600x780", "portrait")])
def test_flags_panel_scrolls_to_every_flag(tmp_path, size, folder):
    """Three flags (sea-level pressure, below the warm-water criterion, conductivity): none is cut off."""
    from kivy.metrics import dp

    seed_sites(tmp_path / "data")
    notes = run_scenario("flags_panel", tmp_path / "data", tmp_path, size=size, artifacts=ARTIFACTS / folder)
    assert len(notes["flag_words"]) >= 2
    results_h, tiles_h, title_h, rows_h, view_h = notes["quiet_panel"]
    assert view_h >= rows_h - 1  # the one quiet row shows whole, no scrolling needed
    if folder == "portrait":  # common practice (small screens): no empty band between checks and form
        assert results_h <= tiles_h + title_h + rows_h + dp(34) + 1
    # 2.1 mg/L is hypoxic (below 2 mg/L is the usual line, common practice; 2.1 sits at it) and 1040 hPa at
    # 610 m looks sea-level adjusted: the tiles carry the warning colour without reading the panel
    (sat_caption, sat_warn), (pct_caption, pct_warn), (mg_caption, mg_warn) = notes["tiles"]
    assert sat_warn and sat_caption == "▲ Check 2 of its inputs first", notes["tiles"]  # pressure, conductivity
    assert pct_warn and mg_warn and pct_caption.startswith("▲") and mg_caption.startswith("▲"), notes["tiles"]
    height, content, kind = notes["panel"]
    assert kind == "ScrollView"
    assert notes["each_flag_fits_when_scrolled"] == [True] * len(notes["flag_words"])
    assert notes["bar_width"] >= dp(10) - 0.5  # a bar a gloved finger can see and drag
    if content > height + 1:
        assert f"· {len(notes['flag_words'])} — scroll to see all" in notes["title"]
