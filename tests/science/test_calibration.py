"""Meter air calibration: the 100 % target and the checks (USGS NFM A6.2; tolerance ±0.2 mg/L common practice)."""

from __future__ import annotations

import pytest

from core.science.calibration import calibration_target_mg_l, check_calibration, post_trip_check


def test_target_is_saturation_at_station_pressure_fresh_water():
    # Benson & Krause (1984) / 4500-O:I examples: 20 °C, 0.9 atm -> 8.1623; 10 °C, 0.8 atm -> 9.0042
    assert calibration_target_mg_l(20.0, 0.9 * 1013.25) == pytest.approx(8.1623, abs=2e-4)
    assert calibration_target_mg_l(10.0, 0.8 * 1013.25) == pytest.approx(9.0042, abs=2e-4)


def test_check_passes_and_fails_at_the_tolerance():
    # common practice: ±0.2 mg/L acceptance; 20 °C, 1 atm target 9.092 (4500-O:I)
    ok = check_calibration(9.25, 20.0, 1013.25)
    assert ok.passed and ok.flags == [] and ok.target_mg_l == pytest.approx(9.092, abs=0.002)
    assert ok.difference_mg_l == pytest.approx(9.25 - ok.target_mg_l)
    bad = check_calibration(9.35, 20.0, 1013.25)
    assert not bad.passed and [f.code for f in bad.flags] == ["calibration.out_of_tolerance"]
    strict = check_calibration(9.2, 20.0, 1013.25, tolerance_mg_l=0.1)
    assert not strict.passed and strict.tolerance_mg_l == 0.1


def test_post_trip_drift():
    r = post_trip_check(8.6, 20.0, 1013.25)
    assert not r.passed and r.flags[0].code == "calibration.post_trip_drift"
    assert "SOP" in r.flags[0].action
    assert post_trip_check(9.0, 20.0, 1013.25).passed


def test_refusals():
    with pytest.raises(ValueError, match="^reading_mg_l"):
        check_calibration(-1.0, 20.0, 1013.25)
    with pytest.raises(ValueError, match="^tolerance_mg_l"):
        check_calibration(9.0, 20.0, 1013.25, tolerance_mg_l=0.0)
    with pytest.raises(ValueError, match="^pressure_hpa"):
        post_trip_check(9.0, 20.0, float("inf"))
