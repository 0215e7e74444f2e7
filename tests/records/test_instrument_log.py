"""A calibration log per instrument in the program settings: zero-DO check, reference barometer, drift limit in
mg/L or % (USGS National Field Manual A6.2 for the checks [memory for the limits: common practice])."""

from __future__ import annotations

from datetime import datetime, timedelta, timezone

import pytest

from core.records.models import Calibration, InstrumentLog, ProgramSettings, Site, Stop, Trip, measure
from core.rules.qc import TRIP_KEY, derive_trip, trip_flags
from core.science.calibration import calibration_target_mg_l, drift_tolerance_mg_l, instrument_flags

T0 = datetime(2026, 6, 14, 9, 0, tzinfo=timezone.utc)
SITES = {"LO": Site(id="LO", name="Low ford", elevation_m=40.0)}


def codes(flags):
    return [f.code for f in flags]


def test_zero_and_barometer_checks_fire_and_not():
    assert codes(instrument_flags("DO-7", zero_do_mg_l=0.35)) == ["instrument.zero_do"]  # > 0.2 mg/L
    assert instrument_flags("DO-7", zero_do_mg_l=0.15) == []
    assert codes(instrument_flags("DO-7", barometer_difference_hpa=-3.1)) == ["instrument.barometer"]
    assert instrument_flags("DO-7", barometer_difference_hpa=1.4) == []
    assert "DO-7" in instrument_flags("DO-7", zero_do_mg_l=0.5)[0].message


def test_drift_limit_in_percent_of_the_target():
    # 2 % of a 9.09 mg/L target (20 °C, 1 atm: Benson & Krause 1984) is 0.18 mg/L
    target = float(calibration_target_mg_l(20.0, 1013.25))
    assert drift_tolerance_mg_l(2.0, "%", target) == pytest.approx(0.02 * target)
    assert drift_tolerance_mg_l(0.3, "mg/L", target) == 0.3
    with pytest.raises(ValueError):
        drift_tolerance_mg_l(0.3, "ppm", target)


def _trip(post_reading):
    stop = Stop(site_id="LO", arrived_at=T0, temp=measure("temp", "12 °C"), pressure=measure("pressure", "1010 hPa"))
    post = Calibration(
        kind="post-trip",
        at=T0 + timedelta(hours=6),
        temp=measure("temp", "20 °C"),
        pressure=measure("pressure", "1013.25 hPa"),
        reading_mg_l=post_reading,
    )
    return Trip(started_at=T0, meter_id="DO-7", stops=[stop], post_check=post)


def test_the_meters_drift_limit_decides_the_post_trip_check():
    target = float(calibration_target_mg_l(20.0, 1013.25))
    log = InstrumentLog(serial="do-7", drift_limit=5.0, drift_unit="%")  # ±0.45 mg/L for this meter
    loose = ProgramSettings(instruments=[log])
    reading = target + 0.3  # outside the program's 0.2
    assert derive_trip(_trip(reading), SITES, ProgramSettings()).post_check.accepted is False
    assert derive_trip(_trip(reading), SITES, loose).post_check.accepted is True
    assert loose.instrument(" DO-7 ") is log and loose.instrument("DO-8") is None


def test_log_findings_show_on_the_trip():
    log = InstrumentLog(serial="DO-7", zero_do_mg_l=0.4, zero_checked_at=T0 - timedelta(days=1))
    trip = derive_trip(_trip(9.0), SITES, ProgramSettings(instruments=[log]))
    flags = trip_flags(trip, ProgramSettings(instruments=[log]), T0 + timedelta(hours=7), sites=SITES)
    assert "instrument.zero_do" in codes(flags[TRIP_KEY])
    ok = InstrumentLog(serial="DO-7", zero_do_mg_l=0.1)
    flags = trip_flags(trip, ProgramSettings(instruments=[ok]), T0 + timedelta(hours=7), sites=SITES)
    assert "instrument.zero_do" not in codes(flags[TRIP_KEY])
    # older settings (no instruments) still validate
    assert ProgramSettings.model_validate({"program": "x"}).instruments == []


def test_reporting_decimals_are_a_program_setting_and_never_touch_stored_values():
    # common practice defaults: DO 0.1 mg/L, % whole, temperature 0.1 °C, SC 3 significant figures
    from core.rules.report import Rounding, rounding_for

    assert rounding_for(ProgramSettings()) == Rounding()
    assert rounding_for(ProgramSettings(reporting_decimals={"do_mg_l": 2})).do_mg_l == 2
    # older settings files that kept it as an unknown field still read the same
    old = ProgramSettings.model_validate_json('{"program": "x", "reporting_decimals": {"percent": 1}}')
    assert rounding_for(old).percent == 1
    trip = derive_trip(_trip(9.0), SITES, ProgramSettings(reporting_decimals={"do_mg_l": 0}))
    assert trip.post_check.reading_mg_l == 9.0 and trip.stops[0].derived.do_sat_mg_l != round(
        trip.stops[0].derived.do_sat_mg_l
    )
