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
        assert "tap °F" in flags, flags  # what to do, not only what is wrong (common practice)
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


def test_field_slips_say_what_to_type(tmp_path):
    """A sea-level (weather-service) pressure at a 610 m site, °F typed with °C chosen and an empty
    meter DO when closing: each says what is wrong and what to type; the arrival time says its clock."""
    from datetime import datetime

    from core.records.messages import offset_text
    from tests.app.conftest import seed_sites

    seed_sites(tmp_path / "data")
    notes = run_scenario("field_slips", tmp_path / "data", tmp_path, artifacts=ARTIFACTS / "slips")
    # the arrival field names the clock its time is in (this tablet's offset for a new stop)
    assert notes["arrived_label"].endswith("clock " + offset_text(datetime.now().astimezone()))
    # 1013 hPa at 610 m is far above the standard atmosphere there (US Standard Atmosphere 1976:
    # about 942 hPa); the flag says so and gives the station pressure to type instead
    flags = notes["sea_level"]["flags"]
    hit = [f for f in flags if "sea-level" in f]
    assert hit, flags
    # US Standard Atmosphere 1976 barometric formula (troposphere): p = p0 (1 − 2.25577e-5 h)^5.25588
    station = 1013.0 * (1 - 2.25577e-5 * 610.0) ** 5.25588
    said = float(hit[0].split("about ")[1].split(" hPa")[0])
    assert said == pytest.approx(station, abs=0.3)
    # the target and % tiles rest on that pressure: they say so at a glance (common practice)
    assert notes["sea_level"]["target_tiles"] == ["▲ Check the pressure first", True, True]
    assert notes["f_as_c"]["target_tiles"][1:] == [False, False]  # no target computed, nothing to doubt
    # °F typed with °C chosen: the line names the unit mix-up and says what to tap or type
    (line,) = [f for f in notes["f_as_c"]["flags"] if f.startswith("CHECK ENTRY")]
    _word, message, action = line.split("|")
    assert "°F" in message and "tap °F" in action and "in °C" in action, line
    # closing with the meter DO empty is refused and names the field
    message, closed = notes["close_empty_do"]
    assert message.startswith("■") and "Meter DO" in message and closed is False
    # a bottle fixed now shows its time on the tablet's own clock (no offset needed)
    assert notes["bottle_details"][0].startswith("DO fixed · fixed ") and "UTC" not in notes["bottle_details"][0]
    # a duplicate ID (any case) is refused with what to do; typing the next ID clears that refusal
    assert notes["duplicate"].startswith("■ Refused") and "check the label or scan again" in notes["duplicate"]
    assert notes["after_retyping"] == ""
