"""Pressure checks beyond one reading: the calibration pressure against where the meter was calibrated, and a
trip's pressures that stay flat across elevations (US Standard Atmosphere 1976: about 0.12 hPa per metre
near sea level, team science reference §10; thresholds common practice)."""

from __future__ import annotations

from datetime import datetime, timedelta, timezone

import pytest

from core.records.models import Calibration, ProgramSettings, Site, Stop, Trip, measure
from core.rules.qc import TRIP_KEY, derive_trip, trip_flags
from core.science.pressure import flat_pressure_flag, standard_pressure_hpa

T0 = datetime(2026, 6, 14, 9, 0, tzinfo=timezone.utc)
SITES = {
    "LO": Site(id="LO", name="Low ford", elevation_m=40.0),
    "MID": Site(id="MID", name="Mill", elevation_m=260.0),
    "HI": Site(id="HI", name="Upper falls", elevation_m=640.0),
}


def stop(site, p, i):
    return Stop(
        site_id=site,
        arrived_at=T0 + timedelta(hours=i),
        temp=measure("temp", "12 °C"),
        pressure=measure("pressure", f"{p} hPa"),
        do=measure("do", "9.5 mg/L"),
    )


def codes(flags):
    return [f.code for f in flags]


def test_flat_series_across_elevations_fires():
    # all three read about the sea-level value: flat across 600 m where ~70 hPa is expected
    trip = Trip(started_at=T0, stops=[stop("LO", 1016.0, 0), stop("MID", 1015.2, 1), stop("HI", 1015.8, 2)])
    flags = trip_flags(trip, ProgramSettings(), T0 + timedelta(hours=3), sites=SITES)[TRIP_KEY]
    f = [x for x in flags if x.code == "pressure.flat_across_elevations"]
    assert f and "40 m" in f[0].message and "640 m" in f[0].message and "0.12 hPa per metre" in f[0].message
    # the single-reading check cannot see it at the low site (1016 hPa at 40 m is ordinary weather)
    assert standard_pressure_hpa(40.0) + 40 > 1016.0


def test_station_pressures_do_not_fire():
    # station pressures following the standard atmosphere (plus a 6 hPa high): no flag
    series = [
        stop(s, round(standard_pressure_hpa(SITES[s].elevation_m) + 6.0, 1), i)
        for i, s in enumerate(("LO", "MID", "HI"))
    ]
    flags = trip_flags(Trip(started_at=T0, stops=series), ProgramSettings(), T0 + timedelta(hours=3), sites=SITES)
    assert "pressure.flat_across_elevations" not in codes(flags[TRIP_KEY])


def test_a_higher_stop_reading_more_pressure_is_said_in_words():
    # 186 m at 990.2 hPa (a station reading) and 520 m at 1013.4 hPa (a sea-level value): pressure should
    # fall about 39 hPa over 334 m (US Standard Atmosphere 1976), not rise 23 hPa
    f = flat_pressure_flag([("Stop 1", 186.0, 990.2), ("Stop 3", 520.0, 1013.4)])
    assert f is not None and "the higher stop read 23.2 hPa more" in f.message and "-23" not in f.message
    assert "about 39 hPa" in f.message
    same = flat_pressure_flag([("a", 40.0, 1013.0), ("b", 200.0, 1013.0)])
    assert same is not None and "the same pressure" in same.message


def test_small_spread_is_not_judged():
    # 40 m and 150 m: 110 m apart, under the 150 m spread the check needs
    assert flat_pressure_flag([("a", 40.0, 1013.0), ("b", 150.0, 1013.0)]) is None
    assert flat_pressure_flag([("a", 40.0, 1013.0), ("b", 200.0, 1013.0)]) is not None
    assert flat_pressure_flag([("a", 40.0, 1013.0)]) is None


def _cal(p):
    return Calibration(
        at=T0 - timedelta(hours=1),
        temp=measure("temp", "15 °C"),
        pressure=measure("pressure", f"{p} hPa"),
        reading_mg_l=9.0,
    )


def test_calibration_pressure_checked_against_the_calibration_elevation():
    # office at 900 m (a setting): a 1013 hPa calibration pressure there looks sea-level adjusted
    settings = ProgramSettings(calibration_elevation_m=900.0)
    trip = Trip(started_at=T0, stops=[stop("LO", 1010.0, 0)], pre_calibration=_cal(1013.0))
    cal = derive_trip(trip, SITES, settings).pre_calibration
    assert "pressure.sea_level_adjusted" in [f.code for f in cal.flags]
    assert cal.flags[-1].message.startswith("Calibration pressure:")
    # without the setting the first site (40 m) is where it was calibrated: 1013 hPa is plausible there
    cal = derive_trip(trip, SITES, ProgramSettings()).pre_calibration
    assert "pressure.sea_level_adjusted" not in [f.code for f in cal.flags]
    # far below standard at the first site (mmHg typed as hPa): flagged too
    low = Trip(started_at=T0, stops=[stop("LO", 1010.0, 0)], pre_calibration=_cal(760.0))
    assert "pressure.far_below_standard" in [
        f.code for f in derive_trip(low, SITES, ProgramSettings()).pre_calibration.flags
    ]
    with pytest.raises(ValueError):
        ProgramSettings(calibration_elevation_m=9000.0)
