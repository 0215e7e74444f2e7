"""Pressure units, the standard atmosphere and the sea-level-adjusted check."""

from __future__ import annotations

import numpy as np
import pytest

from core.flags import Severity
from core.science.pressure import (
    PRESSURE_UNITS,
    SEA_LEVEL_ADJUSTED_THRESHOLD_HPA,
    from_hpa,
    sea_level_adjusted_flag,
    sea_level_to_station_hpa,
    standard_pressure_hpa,
    station_to_sea_level_hpa,
    to_hpa,
)
from tests.science._refdata import ids, rows


@pytest.mark.parametrize("row", rows("pressure_units.csv"), ids=ids("pressure_units.csv", "unit"))
def test_unit_conversions(row):
    # source: the row's `source` column (NIST SP 811 / definitions)
    got = to_hpa(float(row["value"]), row["unit"])
    assert abs(got - float(row["hpa"])) <= float(row["tolerance_hpa"])
    assert from_hpa(float(row["hpa"]), row["unit"]) == pytest.approx(
        float(row["value"]), rel=float(row["tolerance_hpa"]) / 1013.25 + 1e-12
    )


def test_units_tuple_is_the_contract():
    # CONTRACTS.md: the nine units, in this order
    assert PRESSURE_UNITS == ("hPa", "mbar", "kPa", "Pa", "mmHg", "torr", "inHg", "atm", "psi")
    for u in PRESSURE_UNITS:
        assert to_hpa(1.0, u.upper()) == to_hpa(1.0, u)  # case-insensitive


@pytest.mark.parametrize("row", rows("standard_atmosphere.csv"), ids=ids("standard_atmosphere.csv", "elevation_m"))
def test_standard_atmosphere(row):
    # source: the row's `source` column (US Standard Atmosphere 1976)
    got_pa = standard_pressure_hpa(float(row["elevation_m"])) * 100.0
    assert abs(got_pa - float(row["pressure_pa"])) <= float(row["tolerance_pa"])


def test_standard_atmosphere_array_and_limits():
    # US Standard Atmosphere 1976: troposphere formula; decreasing with height
    h = np.array([0.0, 1000.0, 3000.0])
    p = standard_pressure_hpa(h)
    assert p.shape == (3,) and np.all(np.diff(p) < 0)
    assert p[1] == pytest.approx(898.746, abs=0.01)  # 1000 m -> 89 874.6 Pa (team science reference §4)
    for bad in (-2000.0, 20000.0, float("nan")):
        with pytest.raises(ValueError, match="^elevation_m"):
            standard_pressure_hpa(bad)


def test_sea_level_round_trip():
    # US Standard Atmosphere 1976: a sea-level 1013.25 hPa is the standard pressure at the station
    assert sea_level_to_station_hpa(1013.25, 1000.0) == pytest.approx(898.746, abs=0.01)
    for p, h in [(990.0, 250.0), (1030.0, 1800.0), (1005.0, -200.0)]:
        assert station_to_sea_level_hpa(sea_level_to_station_hpa(p, h), h) == pytest.approx(p, rel=1e-12)
    with pytest.raises(ValueError, match="^p_sea_level_hpa"):
        sea_level_to_station_hpa(-1.0, 100.0)


def test_sea_level_adjusted_flag_fires_on_weather_report_at_elevation():
    # common practice: a weather-service (sea-level) value at a site at 1200 m is ~130 hPa too high
    f = sea_level_adjusted_flag(1016.0, 1200.0)
    assert f is not None and f.code == "pressure.sea_level_adjusted" and f.severity is Severity.WARNING
    assert "sea-level" in f.message and "station pressure" in f.action
    # ... and the estimated station pressure it suggests is the standard-atmosphere reduction
    assert f"{sea_level_to_station_hpa(1016.0, 1200.0):.1f}" in f.action


@pytest.mark.parametrize("p_hpa", [960.0, 985.0, 1013.25, 1030.0, 1045.0])
def test_sea_level_adjusted_flag_silent_on_ordinary_weather_at_sea_level(p_hpa):
    # common practice: ordinary sea-level weather spans about 960–1045 hPa and must not be flagged
    assert sea_level_adjusted_flag(p_hpa, 0.0) is None


def test_sea_level_adjusted_flag_silent_on_true_station_pressure_at_elevation():
    # a true station reading at 1500 m in a strong high (standard 845.6 hPa + 25 hPa) is fine
    assert sea_level_adjusted_flag(standard_pressure_hpa(1500.0) + 25.0, 1500.0) is None
    assert SEA_LEVEL_ADJUSTED_THRESHOLD_HPA == 40.0
    assert sea_level_adjusted_flag(standard_pressure_hpa(1500.0) + 41.0, 1500.0) is not None
    assert sea_level_adjusted_flag(standard_pressure_hpa(1500.0) + 25.0, 1500.0, threshold_hpa=20.0) is not None


def test_conversion_refuses_negative_and_unknown_units():
    with pytest.raises(ValueError, match="^pressure"):
        to_hpa(-1.0, "hPa")
    with pytest.raises(ValueError, match="not a pressure unit"):
        to_hpa(1.0, "bar of soap")
    with pytest.raises(ValueError, match="^pressure_hpa"):
        from_hpa(float("nan"), "mmHg")


def test_far_below_standard_catches_mmhg_typed_as_hpa():
    # common practice: 752 (a mmHg reading) entered as hPa at a 100 m site is 249 hPa too low
    from core.science.pressure import far_below_standard_flag, station_pressure_flags

    f = far_below_standard_flag(752.0, 100.0)
    assert f is not None and f.code == "pressure.far_below_standard" and "mmHg" in f.action
    # the deepest ordinary lows at sea level (about 950 hPa) and a true reading at 2500 m are not flagged
    assert far_below_standard_flag(950.0, 0.0) is None
    assert far_below_standard_flag(standard_pressure_hpa(2500.0) - 30.0, 2500.0) is None
    assert [x.code for x in station_pressure_flags(1016.0, 1200.0)] == ["pressure.sea_level_adjusted"]
    assert station_pressure_flags(1005.0, 50.0) == []
