"""QC rules: each one made to fire and made not to (pure functions: records and `now` in, flags out)."""

from __future__ import annotations

from datetime import timedelta

import pytest

from core.flags import Severity
from core.records.models import ProgramSettings, Site
from core.rules.qc import RULE_CODES, TRIP_KEY, derive_trip, trip_flags
from tests.records.conftest import T0, make_bottle, make_cal, make_stop, make_trip

SITES = {
    "LK-01": Site(id="LK-01", name="Mill Ford", elevation_m=212.0, water_class="warm"),
    "LK-03": Site(id="LK-03", name="Alder Gauge", elevation_m=395.0, water_class="cold"),
    "LK-05": Site(id="LK-05", name="Tamsin Falls Pool", elevation_m=1500.0, water_class="cold"),
}
SETTINGS = ProgramSettings()


def codes(stops=(), now=None, others=None, sites=SITES, **trip_kw):
    trip_kw.setdefault("pre_calibration", make_cal(9.09))
    trip = derive_trip(make_trip(list(stops), **trip_kw), sites or {}, SETTINGS)
    found = trip_flags(trip, SETTINGS, now or T0 + timedelta(hours=1), other_bottle_labels=others, sites=sites)
    return {k: [f.code for f in v] for k, v in found.items()}, trip


def stop_codes(*stops, **kw):
    found, trip = codes(stops, **kw)
    return [found[s.id] for s in trip.stops] if len(stops) > 1 else found[trip.stops[0].id]


# 1 atm = 1013.25 hPa; at 20 °C, S = 0 the saturation is 9.092 mg/L (Benson & Krause 1984).
ATM = "1013.25 hPa"


def test_rule_codes_listed():
    assert len(set(RULE_CODES)) == len(RULE_CODES) >= 15


# -- pressure looks sea-level adjusted ------------------------------------------------------------
def test_sea_level_pressure_fires_at_elevation():
    # US Standard Atmosphere 1976: about 845.6 hPa at 1500 m, so 1013 hPa there is a sea-level value.
    assert "pressure.sea_level_adjusted" in stop_codes(make_stop("LK-05", pressure="1013.0 hPa", temp="12"))


def test_station_pressure_at_elevation_passes():
    assert "pressure.sea_level_adjusted" not in stop_codes(make_stop("LK-05", pressure="846 hPa", temp="12"))


# -- supersaturation, criteria, hypoxia -------------------------------------------------------
def test_supersaturation_fires():
    # 12.0 / 9.092 = 132 % > 120 % (threshold: common practice)
    assert "do.supersaturated" in stop_codes(make_stop(temp="20", pressure=ATM, cond=None, do="12.0"))


def test_saturation_near_100_percent_passes():
    assert "do.supersaturated" not in stop_codes(make_stop(temp="20", pressure=ATM, cond=None, do="9.0"))


def test_below_warm_criterion_fires_and_passes():
    # warm-water criterion 5.0 mg/L (common practice; many state standards)
    assert "do.below_criterion" in stop_codes(make_stop("LK-01", temp="20", pressure=ATM, do="4.5"))
    assert "do.below_criterion" not in stop_codes(make_stop("LK-01", temp="20", pressure=ATM, do="6.0"))


def test_below_cold_criterion_fires():
    # cold-water 6.5 mg/L (US EPA 440/5-86-003, 30-day mean; from memory): 6.0 is below, 6.0 > warm 5.0
    assert "do.below_criterion" in stop_codes(make_stop("LK-03", temp="12", pressure="965 hPa", do="6.0"))


def test_site_criterion_overrides_program():
    sites = dict(
        SITES, **{"LK-01": Site(id="LK-01", name="Mill Ford", elevation_m=212.0, water_class="warm", min_do_mg_l=7.0)}
    )
    assert "do.below_criterion" in stop_codes(make_stop("LK-01", temp="20", pressure=ATM, do="6.0"), sites=sites)


def test_hypoxic_fires_and_passes():
    got = stop_codes(make_stop(temp="20", pressure=ATM, do="1.5"))  # below 2 mg/L (common practice)
    assert "do.hypoxic" in got
    assert "do.hypoxic" not in stop_codes(make_stop(temp="20", pressure=ATM, do="3.0"))


# -- calibration ----------------------------------------------------------------------------
def test_pre_calibration_far_from_target_fires():
    # target 9.092 mg/L at 20 °C, 1 atm (Benson & Krause 1984; air calibration per USGS NFM A6.2);
    # 9.50 is 0.41 off, tolerance ±0.2 (common practice)
    found, _ = codes([make_stop()], pre_calibration=make_cal(9.50))
    assert "calibration.out_of_tolerance" in found[TRIP_KEY]


def test_pre_calibration_within_tolerance_passes():
    found, trip = codes([make_stop()], pre_calibration=make_cal(9.10))
    assert "calibration.out_of_tolerance" not in found[TRIP_KEY]
    assert trip.pre_calibration.accepted is True
    assert trip.pre_calibration.target_mg_l == pytest.approx(9.092, abs=0.002)  # Benson & Krause (1984)


def test_calibration_missing_fires_and_passes():
    found, _ = codes([make_stop()], pre_calibration=None)
    assert "calibration.missing" in found[TRIP_KEY]
    found, _ = codes([make_stop()])
    assert "calibration.missing" not in found[TRIP_KEY]


def test_post_trip_drift_fires_and_passes():
    found, _ = codes([make_stop()], post_check=make_cal(8.70, kind="post-trip"))
    assert "calibration.post_trip_drift" in found[TRIP_KEY]
    found, _ = codes([make_stop()], post_check=make_cal(9.00, kind="post-trip"))
    assert "calibration.post_trip_drift" not in found[TRIP_KEY]


# -- bottles --------------------------------------------------------------------------------
def test_bottle_label_twice_in_trip_fires():
    a = make_stop(bottles=[make_bottle("TV-0701")])
    b = make_stop("LK-03", at=T0 + timedelta(minutes=40), bottles=[make_bottle("TV-0701")])
    got = stop_codes(a, b)
    assert all("bottle.duplicate_label" in g for g in got)


def test_distinct_bottle_labels_pass():
    a = make_stop(bottles=[make_bottle("TV-0701")])
    b = make_stop("LK-03", at=T0 + timedelta(minutes=40), bottles=[make_bottle("TV-0702")])
    assert not any("bottle.duplicate_label" in g for g in stop_codes(a, b))


def test_bottle_label_used_elsewhere_on_device_fires():
    got = stop_codes(make_stop(bottles=[make_bottle("TV-0800")]), others={"TV-0800": "another-trip"})
    assert "bottle.duplicate_label" in got


def test_bottle_label_of_this_trip_itself_passes():
    _found, trip = codes([make_stop(bottles=[make_bottle("TV-0800")])])
    again = trip_flags(trip, SETTINGS, T0 + timedelta(hours=1), other_bottle_labels={"TV-0800": trip.id}, sites=SITES)
    assert "bottle.duplicate_label" not in [f.code for f in again[trip.stops[0].id]]


def test_winkler_bottle_not_fixed_fires_and_passes():
    assert "bottle.not_fixed" in stop_codes(make_stop(bottles=[make_bottle("W1", kind="do-fixed")]))
    fixed = make_bottle("W1", kind="do-fixed", fixed=T0 + timedelta(minutes=2))
    assert "bottle.not_fixed" not in stop_codes(make_stop(bottles=[fixed]))


# -- holding times (BOD 48 h, 40 CFR 136.3 Table II, from memory) ----------------------------
def test_holding_expired_fires():
    got = stop_codes(make_stop(bottles=[make_bottle("B1", kind="bod")]), now=T0 + timedelta(hours=49))
    assert "holding.expired" in got


def test_holding_about_to_pass_fires_soon():
    got = stop_codes(make_stop(bottles=[make_bottle("B1", kind="bod")]), now=T0 + timedelta(hours=40))
    assert "holding.soon" in got and "holding.expired" not in got


def test_holding_fresh_sample_passes():
    got = stop_codes(make_stop(bottles=[make_bottle("B1", kind="bod")]), now=T0 + timedelta(hours=2))
    assert "holding.soon" not in got and "holding.expired" not in got


def test_holding_ignored_once_lab_results_exist():
    from core.records.models import LabResult

    b = make_bottle("B1", kind="bod", lab_results=[LabResult(analyte="bod5", value=1.2, unit="mg/L")])
    assert "holding.expired" not in stop_codes(make_stop(bottles=[b]), now=T0 + timedelta(hours=60))


def test_holding_sop_override_applies():
    settings = ProgramSettings(holding_overrides_h={"bod": 24.0})
    trip = derive_trip(make_trip([make_stop(bottles=[make_bottle("B1", kind="bod")])]), SITES, settings)
    found = trip_flags(trip, settings, T0 + timedelta(hours=30), sites=SITES)
    assert "holding.expired" in [f.code for f in found[trip.stops[0].id]]


# -- ranges and jumps -----------------------------------------------------------------------
def test_temperature_out_of_plausible_range_fires_and_passes():
    assert "temp.out_of_range" in stop_codes(make_stop(temp="38"))  # plausible 0–35 °C: common practice
    assert "temp.out_of_range" not in stop_codes(make_stop(temp="18"))


def test_temperature_that_looks_fahrenheit_fires_and_passes():
    assert "temp.looks_fahrenheit" in stop_codes(make_stop(temp="45"))
    assert "temp.looks_fahrenheit" not in stop_codes(make_stop(temp="18"))


def test_conductivity_out_of_range_fires_and_passes():
    assert "conductivity.out_of_range" in stop_codes(make_stop(cond="8000 uS/cm"))  # common practice bounds
    assert "conductivity.out_of_range" not in stop_codes(make_stop(cond="300 uS/cm"))


def test_temperature_jump_fires_and_passes():
    a = make_stop(temp="10")
    b = make_stop("LK-03", at=T0 + timedelta(minutes=30), temp="20")
    assert "temp.jump" in stop_codes(a, b)[1]
    c = make_stop("LK-03", at=T0 + timedelta(minutes=30), temp="14")
    assert "temp.jump" not in stop_codes(a, c)[1]


def test_jump_checked_in_route_order_not_list_order():
    late = make_stop("LK-03", at=T0 + timedelta(minutes=30), temp="20")
    early = make_stop(temp="10")
    got = stop_codes(late, early)  # listed out of order
    assert "temp.jump" in got[0] and "temp.jump" not in got[1]


def test_conductivity_jump_fires_and_passes():
    a = make_stop(cond="100 uS/cm")
    b = make_stop("LK-03", at=T0 + timedelta(minutes=30), cond="400 uS/cm")
    assert "conductivity.jump" in stop_codes(a, b)[1]
    c = make_stop("LK-03", at=T0 + timedelta(minutes=30), cond="250 uS/cm")
    assert "conductivity.jump" not in stop_codes(a, c)[1]


# -- closing a stop, unknown sites ---------------------------------------------------------
def test_closed_stop_missing_required_fires():
    got = stop_codes(make_stop(do=None, closed=True))
    assert "stop.missing_required" in got


def test_closed_complete_stop_and_open_incomplete_stop_pass():
    assert "stop.missing_required" not in stop_codes(make_stop(closed=True))
    assert "stop.missing_required" not in stop_codes(make_stop(do=None, closed=False))


def test_unknown_site_fires_and_passes():
    assert "stop.unknown_site" in stop_codes(make_stop("LK-99"))
    assert "stop.unknown_site" not in stop_codes(make_stop("LK-01"))


def test_flags_are_worst_first_and_carry_actions():
    a = make_stop(temp="20", pressure=ATM, do="1.5", bottles=[make_bottle("W", kind="do-fixed")])
    _found, trip = codes([a])
    flags = trip_flags(trip, SETTINGS, T0 + timedelta(hours=1), sites=SITES)[trip.stops[0].id]
    ranks = [f.severity.rank for f in flags]
    assert ranks == sorted(ranks, reverse=True) and flags[0].severity == Severity.STOP
    assert all(f.message and f.action for f in flags)
