"""assess_reading: one reading in, saturation, % saturation and flags out."""

from __future__ import annotations

import gsw
import pytest

from core.science.assess import assess_reading
from core.science.criteria import Criteria

SAT_KEYS = ["do_sat_mg_l", "percent_saturation", "salinity", "pressure_hpa", "temp_c", "method", "flags"]


def test_basic_fresh_reading():
    # Benson & Krause (1984) / 4500-O:I: 20 °C, 1 atm, S 0 -> 9.092 mg/L; % = 100·DO/Cp (USGS NFM A6.2)
    a = assess_reading(20.0, 1013.25, do_mg_l=9.092)
    assert a.do_sat_mg_l == pytest.approx(9.092, abs=0.002)
    assert a.percent_saturation == pytest.approx(100.0, abs=0.05)
    assert a.salinity == 0.0 and a.salinity_source == "default"
    d = a.to_dict()
    assert list(d)[:7] == SAT_KEYS
    assert d["flags"] == []


def test_salinity_from_conductivity_in_situ_and_at_25():
    # source: gsw.SP_from_C (TEOS-10) for the salinity of 410 µS/cm at 18.5 °C and at 25 °C
    a = assess_reading(18.5, 1002.5, conductivity_us_cm=410.0, do_mg_l=8.4)
    assert a.salinity_source == "conductivity"
    assert a.salinity == pytest.approx(float(gsw.SP_from_C(0.41, 18.5, 0.0)), abs=1e-10)
    # Standard Methods 2510 B linear law, α = 0.0191
    assert a.specific_conductance_us_cm == pytest.approx(410.0 / (1 + 0.0191 * (18.5 - 25)))
    b = assess_reading(18.5, 1002.5, conductivity_us_cm=410.0, conductivity_is_sc25=True)
    assert b.salinity == pytest.approx(float(gsw.SP_from_C(0.41, 25.0, 0.0)), abs=1e-10)
    assert b.specific_conductance_us_cm == 410.0
    assert b.percent_saturation is None and b.do_mg_l is None


def test_percent_reading_converted_back():
    # USGS NFM A6.2: DO = % / 100 · Cp
    a = assess_reading(10.0, 1013.25, do_percent=50.0)
    assert a.do_mg_l == pytest.approx(11.288 / 2, abs=0.001)  # 4500-O:I, 10 °C -> 11.288


def test_flags_collected():
    # common practice: 68 "°C" looks like °F; a sea-level pressure at 1200 m; hypoxic DO; warm criterion
    a = assess_reading(68.0, 1016.0, do_mg_l=1.2, elevation_m=1200.0, water_class="warm")
    codes = [f.code for f in a.flags]
    for c in (
        "temp.looks_fahrenheit",
        "saturation.temp_out_of_range",
        "pressure.sea_level_adjusted",
        "do.hypoxic",
        "do.below_criterion",
    ):
        assert c in codes
    b = assess_reading(20.0, 1013.25, do_mg_l=11.5, criteria=Criteria(supersaturation_percent=110.0))
    assert [f.code for f in b.flags] == ["do.supersaturated"]


@pytest.mark.parametrize(
    "kw, word",
    [
        (dict(salinity=0.2, conductivity_us_cm=410.0), "both"),
        (dict(do_mg_l=8.0, do_percent=90.0), "both"),
        (dict(method="chlorinity"), "method"),
        (dict(do_mg_l=-1.0), "do_mg_l"),
        (dict(water_class="tepid", do_mg_l=8.0), "water_class"),
        (dict(water_class="tepid"), "water_class"),
    ],
)
def test_refusals(kw, word):
    with pytest.raises(ValueError, match=word):
        assess_reading(20.0, 1000.0, **kw)


def test_garcia_gordon_method_and_version():
    # source: gsw.O2sol_SP_pt(0, 20) = 284.625 µmol/kg × 998.2 kg/m³ × 31.9988 mg/mol ≈ 9.091 mg/L
    a = assess_reading(20.0, 1013.25, method="garcia-gordon")
    assert a.method == "garcia-gordon"
    assert a.do_sat_mg_l == pytest.approx(284.625 * 0.99820 * 0.0319988, abs=0.001)
    assert a.core_version


def test_nearly_pure_water_conductivity_is_flagged_and_uses_zero():
    # PSS-78 (gsw.SP_from_C gives NaN here) cannot resolve 0.5 µS/cm: salinity 0 with a note, saturation as fresh
    a = assess_reading(20.0, 1013.25, conductivity_us_cm=0.5)
    assert a.salinity == 0.0 and [f.code for f in a.flags] == ["salinity.below_formula_range"]
    assert a.do_sat_mg_l == pytest.approx(9.092, abs=0.002)  # 4500-O:I, 20 °C, S 0


def test_pressure_checks_need_elevation():
    # common practice: 752 typed as hPa at a 100 m site is a mmHg value; only checked when the elevation is known
    assert [f.code for f in assess_reading(20.0, 752.0, elevation_m=100.0).flags] == ["pressure.far_below_standard"]
    assert assess_reading(20.0, 752.0).flags == []
