"""The one grammar for typed values (core.science.quantities): every unit, the decimal comma, the limits,
messages naming what the person typed, and property tests (round trips)."""

from __future__ import annotations

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from core.science._validate import ambiguous_comma
from core.science.pressure import HPA_PER_UNIT, PRESSURE_UNITS
from core.science.quantities import LIMITS, QuantityError, read, read_number

SETTINGS = settings(max_examples=150, deadline=None)
INTERNAL_NAMES = (
    "pressure_hpa",
    "percent_sat",
    "parse_",
    "temp_c",
    "do_mg_l",
    "do_percent",
    "elevation_m",
    "conductivity_us_cm",
)


def refused(kind: str, text: str, label: str = "Field", **kw) -> QuantityError:
    with pytest.raises(QuantityError) as info:
        read(kind, text, label, **kw)
    msg = info.value.message
    assert "\n" not in msg and msg.startswith(label)
    for name in INTERNAL_NAMES:
        assert name not in msg, msg
    return info.value


# --- every unit -----------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "text, hpa",
    [
        ("752 mmHg", 752 * 1013.25 / 760),  # 760 mmHg = 1 atm (NIST SP 811)
        ("29.61inHg", 29.61 * 25.4 * 1013.25 / 760),  # 1 inHg = 25.4 mmHg (NIST SP 811)
        ("1002.3 hPa", 1002.3),
        ("1002,3 hPa", 1002.3),  # decimal comma (common practice in much of the world)
        ("1002.3 HPA", 1002.3),
        ("  1002.3hpa ", 1002.3),
        ("100.23 kPa", 1002.3),
        ("100230 Pa", 1002.3),
        ("1002.3 mb", 1002.3),
        ("1002.3 mbar", 1002.3),
        ("0.98 atm", 0.98 * 1013.25),
        ("14.2 psi", 14.2 * 68.94757293168),  # 1 psi = 6894.757 Pa (NIST SP 811)
        ("752 Torr", 752 * 1013.25 / 760),
        ("1.0023e3 hPa", 1002.3),
    ],
)
def test_pressure_units(text, hpa):
    r = read("pressure", text, "Station pressure")
    assert r.value == pytest.approx(hpa, rel=2e-7) and r.unit == "hPa"


@pytest.mark.parametrize(
    "text, default, want",
    [
        ("18.5", None, 18.5),
        ("18,5 °C", None, 18.5),
        ("65 F", None, (65 - 32) * 5 / 9),
        ("65°F", None, (65 - 32) * 5 / 9),
        ("65", "F", (65 - 32) * 5 / 9),
        ("291.65 K", None, 18.5),
        ("-0.5 degC", None, -0.5),
        ("18.5 c", None, 18.5),
        ("18.5 ºC", None, 18.5),
    ],
)
def test_temperature_units(text, default, want):
    # definition of the scales (°F = °C·9/5 + 32; K = °C + 273.15)
    assert read("temp", text, "Water temperature", default_unit=default).value == pytest.approx(want)


@pytest.mark.parametrize(
    "text, us_cm",
    [
        ("410 uS/cm", 410.0),
        ("410 µS/cm", 410.0),
        ("410 μS/cm", 410.0),
        ("0.41 mS/cm", 410.0),
        ("41 mS/m", 410.0),
        ("0,41 mS/cm", 410.0),
        ("410 US/CM", 410.0),
        ("0.041 S/m", 410.0),
        ("410 umho/cm", 410.0),
        ("0.41 mmho/cm", 410.0),
    ],
)
def test_conductivity_units(text, us_cm):
    # SI: 1 mS/cm = 1000 µS/cm, 1 mS/m = 10 µS/cm, 1 S/m = 10 000 µS/cm; 1 mho = 1 S
    assert read("conductivity", text, "Conductivity").value == pytest.approx(us_cm)


@pytest.mark.parametrize("text", ["0.2", "0.2 psu", "0,2 PSU", "0.2psu"])
def test_salinity_bare_or_psu(text):
    assert read("salinity", text, "--salinity").value == pytest.approx(0.2)


@pytest.mark.parametrize(
    "text, m",
    [
        ("1200", 1200.0),
        ("1200 m", 1200.0),
        ("3937 ft", 3937 * 0.3048),
        ("3937 feet", 3937 * 0.3048),
        ("-12,5 m", -12.5),
    ],
)
def test_elevation_m_or_ft(text, m):
    # 1 international foot = 0.3048 m exactly (NIST SP 811)
    assert read("elevation", text, "Elevation").value == pytest.approx(m)


@pytest.mark.parametrize(
    "text, value, unit",
    [
        ("8.4 mg/L", 8.4, "mg/L"),
        ("8,4 mg/l", 8.4, "mg/L"),
        ("92 %", 92.0, "%"),
        ("92%", 92.0, "%"),
        ("92 % sat", 92.0, "%"),
        ("92 percent", 92.0, "%"),
    ],
)
def test_do_mg_l_or_percent(text, value, unit):
    r = read("do", text, "Meter DO")
    assert (r.value, r.unit) == (pytest.approx(value), unit)


# --- refusals: what was wrong, named as typed --------------------------------------------------------


@pytest.mark.parametrize(
    "kind, text, words",
    [
        ("pressure", "752", ["no unit", "mmHg", "inHg", "hPa", "psi"]),
        ("pressure", "", ["empty"]),
        ("pressure", "752 mm", ["unknown unit", "mm"]),
        ("pressure", "1,002.3 hPa", ["decimal comma", "decimal point"]),
        ("pressure", "1 002 hPa", ["not a number"]),
        ("pressure", "hPa", ["not a number"]),
        ("pressure", "seven hundred mmHg", ["not a number"]),
        ("pressure", "nan hPa", ["not a number"]),
        ("pressure", "inf", ["not a usable number"]),
        ("temp", "warm", ["not a number"]),
        ("temp", "18 Q", ["unknown unit", "°F"]),
        ("temp", "1,2.5", ["decimal comma"]),
        ("conductivity", "410", ["no unit", "uS/cm"]),
        ("conductivity", "410 ppm", ["unknown unit"]),
        ("do", "8.4", ["no unit", "mg/L", "%"]),
        ("do", "84 ppm", ["unknown unit"]),
        ("salinity", "0.2 ‰", ["unknown unit", "psu"]),
        ("elevation", "1200 yd", ["unknown unit", "ft"]),
    ],
)
def test_refusals_say_what_was_wrong(kind, text, words):
    msg = refused(kind, text, "Some field").message
    for w in words:
        assert w in msg, msg


def test_exponent_is_a_number_not_a_unit():
    # "1e9 hPa" is a number far out of range, not the number 1 in the unit "e9 hPa"
    e = refused("pressure", "1e9 hPa", "--pressure")
    assert e.code == "pressure.out_of_range" and "400–1100 hPa" in e.message and "unit" not in e.code


@pytest.mark.parametrize(
    "kind, text, code, words",
    [
        # the one table's limits, with the usual mistake named (common practice)
        ("temp", "68", "temp.out_of_range", ["68 °C", "−2–50 °C", "°F"]),
        ("temp", "-500 F", "temp.out_of_range", ["−2–50 °C"]),
        ("pressure", "29.92 hPa", "pressure.out_of_range", ["400–1100 hPa", "inHg"]),
        ("pressure", "1600 hPa", "pressure.out_of_range", ["400–1100 hPa"]),
        ("conductivity", "290 mS/cm", "conductivity.out_of_range", ["“290 mS/cm”", "290000 µS/cm", "0–100000 µS/cm"]),
        ("salinity", "50", "salinity.out_of_range", ["0–42"]),
        ("elevation", "9000", "elevation.out_of_range", ["−430–6000 m", "feet"]),
        ("elevation", "25000 ft", "elevation.out_of_range", ["“25000 ft”", "7620 m"]),
        ("do", "600 %", "do_percent.out_of_range", ["0–300 %"]),
        ("do", "-1 mg/L", "do_mg_l.out_of_range", ["0–25 mg/L"]),
    ],
)
def test_limits(kind, text, code, words):
    e = refused(kind, text, "X")
    assert e.code == code
    for w in words:
        assert w in e.message, e.message


def test_a_bare_do_over_the_mg_l_limit_asks_about_percent():
    e = refused("do", "60", "--do", default_unit="mg/L")
    assert e.message == "--do 60 mg/L is outside 0–25 mg/L — did you mean 60 %?"
    # beyond the % limit too: no suggestion that would be refused in turn
    assert "did you mean" not in refused("do", "400", "--do", default_unit="mg/L").message


def test_limits_are_inclusive_and_one_step_beyond_is_refused():
    for key, kind, unit in (
        ("temp", "temp", "C"),
        ("pressure", "pressure", "hPa"),
        ("conductivity", "conductivity", "uS/cm"),
        ("salinity", "salinity", "psu"),
        ("elevation", "elevation", "m"),
        ("do_mg_l", "do", "mg/L"),
        ("do_percent", "do", "%"),
    ):
        lo, hi, _ = LIMITS[key]
        assert read(kind, f"{lo:g} {unit}", "x").value == pytest.approx(lo)
        assert read(kind, f"{hi:g} {unit}", "x").value == pytest.approx(hi)
        refused(kind, f"{hi + 0.01:.10g} {unit}", "x")
        refused(kind, f"{lo - 0.01:.10g} {unit}", "x")


@pytest.mark.parametrize(
    "text, units, value", [("7.3", (), 7.3), ("7,3 mL", ("mL",), 7.3), ("0.025 N", ("N",), 0.025), ("2e-3", (), 0.002)]
)
def test_plain_numbers(text, units, value):
    assert read_number(text, "--x", units=units) == pytest.approx(value)


@pytest.mark.parametrize(
    "text, units, code",
    [
        ("7.3 L", ("mL",), "unit.invalid"),
        ("x", (), "number.invalid"),
        ("1,234", (), "number.ambiguous_comma"),
        ("", (), "missing"),
        (True, (), "number.bool"),
    ],
)
def test_plain_number_refusals(text, units, code):
    with pytest.raises(QuantityError) as info:
        read_number(text, "--titrant-ml", units=units, accepted="mL, 0 to 100")
    assert info.value.code == code and info.value.message.startswith("--titrant-ml")


# --- properties (hypothesis) ---------------------------------------------------------------------


def _plain(x: float) -> str:
    return f"{x:.10g}"


@SETTINGS
@given(st.floats(400.0, 1100.0), st.sampled_from(PRESSURE_UNITS), st.booleans())
def test_pressure_text_round_trip(hpa, unit, comma):
    # what we print with a unit we read back, with a decimal point or a comma (NIST SP 811 factors)
    number = _plain(hpa / HPA_PER_UNIT[unit])
    if "e" in number:
        return
    text = f"{number.replace('.', ',') if comma else number} {unit}"
    if comma and ambiguous_comma(number.replace(".", ",")):
        # "100,375 hPa": decimal or thousands comma? refused, never guessed (common practice)
        with pytest.raises(QuantityError, match="ambiguous"):
            read("pressure", text, "p")
        return
    try:
        got = read("pressure", text, "p").value
    except QuantityError as exc:  # rounding to 10 digits can step just over a limit
        assert exc.code == "pressure.out_of_range"
        return
    assert math.isclose(got, hpa, rel_tol=1e-8)


@SETTINGS
@given(st.floats(-2.0, 50.0), st.sampled_from(["C", "°C", "F", "°F", "K", "degC"]), st.booleans())
def test_temperature_round_trip(c, unit, comma):
    # °F = °C·9/5 + 32; K = °C + 273.15 (definitions)
    value = {"C": c, "°C": c, "degC": c, "F": c * 1.8 + 32.0, "°F": c * 1.8 + 32.0, "K": c + 273.15}[unit]
    number = _plain(value)
    text = f"{number.replace('.', ',') if comma else number} {unit}"
    if comma and ambiguous_comma(number.replace(".", ",")):
        with pytest.raises(QuantityError, match="ambiguous"):
            read("temp", text, "t")
        return
    try:
        got = read("temp", text, "t").value
    except QuantityError as exc:
        assert exc.code == "temp.out_of_range"
        return
    assert math.isclose(got, c, abs_tol=1e-7)


@SETTINGS
@given(st.floats(0.0, 100000.0), st.sampled_from(["uS/cm", "µS/cm", "mS/cm", "mS/m", "S/m"]))
def test_conductivity_round_trip(us_cm, unit):
    factor = {"uS/cm": 1.0, "µS/cm": 1.0, "mS/cm": 1000.0, "mS/m": 10.0, "S/m": 10000.0}[unit]
    number = _plain(us_cm / factor)
    try:
        got = read("conductivity", f"{number} {unit}", "c").value
    except QuantityError as exc:
        assert exc.code == "conductivity.out_of_range"
        return
    assert math.isclose(got, us_cm, rel_tol=1e-8, abs_tol=1e-9)


@SETTINGS
@given(st.floats(-430.0, 6000.0), st.sampled_from(["", "m", "ft"]))
def test_elevation_round_trip(m, unit):
    number = _plain(m / 0.3048 if unit == "ft" else m)
    try:
        got = read("elevation", f"{number} {unit}".strip(), "e").value
    except QuantityError as exc:
        assert exc.code == "elevation.out_of_range"
        return
    assert math.isclose(got, m, rel_tol=1e-8, abs_tol=1e-7)


@SETTINGS
@given(st.integers(0, 10**6), st.integers(0, 999))
def test_comma_decimals(whole, frac):
    # "W,F" reads as W.F unless exactly three digits follow a non-zero whole part (then refused)
    f = str(frac)
    text = f"{whole},{f}"
    if ambiguous_comma(text):
        assert len(f) == 3 and whole != 0
        with pytest.raises(QuantityError) as info:
            read_number(text, "v")
        assert info.value.code == "number.ambiguous_comma"
    else:
        assert read_number(text, "v") == float(f"{whole}.{f}")


@SETTINGS
@given(st.text(max_size=12))
def test_any_text_reads_or_is_refused_in_one_line(text):
    for kind in ("temp", "pressure", "conductivity", "salinity", "elevation", "do"):
        try:
            r = read(kind, text, "Field")
        except QuantityError as exc:
            assert "\n" not in exc.message and exc.message.startswith("Field")
        else:
            assert math.isfinite(r.value)
