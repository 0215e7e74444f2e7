"""The stop screen driven as a person would, in a real Kivy window (Xvfb), one app per child process.

What the screen showed and what the store holds are compared with core's own values
(core.science.assess, core.science.temperature.f_to_c); unit definitions cite NIST SP 811 (mmHg) or are exact.
"""

from __future__ import annotations

import pytest

from core.science.assess import assess_reading
from core.science.temperature import f_to_c
from core.store import DeviceStore
from tests.app.conftest import ARTIFACTS, run_scenario

pytestmark = pytest.mark.app

MMHG_HPA = 1.33322387415  # conventional millimetre of mercury (NIST SP 811)


@pytest.fixture(scope="module")
def logged(tmp_path_factory):
    from tests.app.conftest import seed_sites

    tmp = tmp_path_factory.mktemp("log_stop")
    seed_sites(tmp / "data")
    notes = run_scenario("log_stop", tmp / "data", tmp, artifacts=ARTIFACTS / "landscape-log-stop")
    return notes, DeviceStore.open(tmp / "data")


def test_empty_required_field_blocks_closing(logged):
    notes, _ = logged
    msg = notes["close_empty"]
    assert msg.startswith("■ Cannot close the stop")
    for label in ("Site", "Water temperature", "Station pressure", "Meter DO"):
        assert label in msg


def test_screen_shows_core_values_as_typed(logged):
    notes, _ = logged
    a = assess_reading(12.4, 968.0, conductivity_us_cm=410.0, do_mg_l=9.8, elevation_m=420.0, water_class="cold")
    shown = notes["after_first"]
    assert shown["sat_text"] == f"{a.do_sat_mg_l:.2f} mg/L"
    assert shown["percent_text"] == f"{a.percent_saturation:.1f} %"
    assert shown["salinity_text"] == f"{a.salinity:.2f}"
    assert shown["salinity_source"] == "from conductivity"


def test_refused_character_is_explained_not_dropped(logged):
    notes, _ = logged
    assert notes["temp_text_after_e"] == "12,4"
    assert "“e”" in notes["refusal_e"] and "decimal point or comma" in notes["refusal_e"]


def test_unit_switches_reach_core(logged):
    notes, _ = logged
    a = assess_reading(
        12.4, 726.1 * MMHG_HPA, conductivity_us_cm=410.0, do_percent=95.0, elevation_m=420.0, water_class="cold"
    )
    shown = notes["after_units"]
    assert shown["sat_text"] == f"{a.do_sat_mg_l:.2f} mg/L"
    assert shown["percent_text"] == "95.0 %"
    assert shown["do_text"] == f"{a.do_mg_l:.2f} mg/L"


def test_duplicate_bottle_id_refused_with_reason(logged):
    notes, _ = logged
    assert notes["duplicate_message"].startswith("■ Refused")
    assert "already used" in notes["duplicate_message"]
    assert notes["bottle_rows"] == ["LK01-A", "LK01-B"]  # typed, then scanned (ID + Enter)


def test_fahrenheit_typed_as_celsius_gets_its_hint(logged):
    notes, _ = logged
    for key in ("f_as_c_54", "f_as_c_68"):
        flags = " ".join(notes[key]["flags"])
        assert "°F" in flags, flags
        assert notes[key]["sat_text"] == "—"
    a = assess_reading(
        float(f_to_c(68.0)),
        726.1 * MMHG_HPA,
        conductivity_us_cm=410.0,
        do_percent=95.0,
        elevation_m=420.0,
        water_class="cold",
    )
    assert notes["after_switch_f"]["sat_text"] == f"{a.do_sat_mg_l:.2f} mg/L"


def test_store_holds_what_was_typed(logged):
    notes, store = logged
    assert notes["save_errors"] == []
    assert notes["close_ok"].startswith("✓")
    trip = store.load_trip(notes["trip_id"])
    assert trip.program == "Tamsin Valley Stream Watch" and trip.crew == ["R.O.", "J.V."]
    assert trip.pre_calibration is not None and trip.pre_calibration.accepted is True
    (stop,) = trip.stops
    assert stop.site_id == "LK-01" and stop.closed_at is not None
    assert stop.temp.text == "68 °F" and stop.temp.value == pytest.approx(20.0)
    assert stop.pressure.text == "726,1 mmHg"
    assert stop.pressure.value == pytest.approx(726.1 * MMHG_HPA)
    assert stop.do.text == "95 %"
    assert [(b.label, b.kind) for b in stop.bottles] == [("LK01-A", "do-fixed"), ("LK01-B", "bod")]
    assert stop.bottles[0].fixed_at is not None and stop.bottles[1].fixed_at is None
    a = assess_reading(
        20.0, 726.1 * MMHG_HPA, conductivity_us_cm=410.0, do_percent=95.0, elevation_m=420.0, water_class="cold"
    )
    assert stop.derived.do_sat_mg_l == pytest.approx(a.do_sat_mg_l)
