"""Records: strict validation traps, typed values kept beside normalised ones, readable messages, schema file."""

from __future__ import annotations

import json
from datetime import datetime

import pytest
from hypothesis import given
from hypothesis import strategies as st
from pydantic import ValidationError

from core.records.messages import TEMPLATES, problems_from_validation, render
from core.records.models import (
    SCHEMA_PATH,
    Bottle,
    InputError,
    Quantity,
    Site,
    Stop,
    Trip,
    measure,
    parse_number,
    schema_text,
)
from tests.records.conftest import T0, make_stop, make_trip


def problems(fn):
    with pytest.raises(ValidationError) as info:
        fn()
    return problems_from_validation(info.value)


def doc_with(**changes):
    doc = make_trip([make_stop()]).to_document()
    doc.update(changes)
    return doc


# ---- pydantic lax-mode traps (issue 3 §1 "known traps") ---------------------------------------
@pytest.mark.parametrize("bad", ["nan", "inf", "-inf", "NaN"])
def test_nan_and_inf_text_refused_as_numbers(bad):
    # pydantic's lax mode would read these strings as floats; strict mode must not.
    doc = doc_with()
    doc["stops"][0]["temp"]["value"] = bad
    probs = problems(lambda: Trip.from_document(doc))
    assert probs[0].code == "number.not_finite"
    assert "Water temperature" in probs[0].message and "NaN and infinity are refused" in probs[0].message


def test_float_nan_object_refused_in_python():
    with pytest.raises(ValidationError) as info:
        Quantity(text="x", entered_value=float("nan"), entered_unit="C", value=1.0, unit="°C")
    assert problems_from_validation(info.value)[0].code == "number.not_finite"


def test_json_nan_literal_refused():
    doc = doc_with()
    doc["stops"][0]["do"]["value"] = float("inf")
    with pytest.raises(ValueError):
        Trip.from_document(doc)  # canonical JSON refuses infinity before validation


def test_true_is_not_a_number():
    doc = doc_with()
    doc["stops"][0]["temp"]["value"] = True
    probs = problems(lambda: Trip.from_document(doc))
    assert probs[0].code == "number.bool"
    assert probs[0].label == "Stop 1: Water temperature"


def test_naive_datetime_refused_python_and_json():
    probs = problems(lambda: Stop(site_id="LK-01", arrived_at=datetime(2026, 6, 14, 9, 0)))
    assert probs[0].code == "time.naive" and "time zone" in probs[0].message
    probs = problems(lambda: Trip.from_document(doc_with(started_at="2026-06-14T08:00:00")))
    assert probs[0].code == "time.naive" and probs[0].label == "Trip start time"


def test_numeric_string_not_coerced_in_python():
    with pytest.raises(ValidationError):
        Site(id="LK-09", name="x", elevation_m="212")


def test_int_timestamp_not_taken_as_time():
    probs = problems(lambda: Trip.from_document(doc_with(started_at=0)))
    assert probs[0].code == "time.invalid"


# ---- decimal comma ----------------------------------------------------------------------------
@pytest.mark.parametrize(
    "text,expected", [("3,5", 3.5), ("3.5", 3.5), ("0,125", 0.125), ("-0,5", -0.5), ("12", 12.0), ("1002,3", 1002.3)]
)
def test_decimal_comma_read_as_decimal(text, expected):
    assert parse_number(text, "do") == expected


def test_decimal_comma_never_read_as_thousands():
    assert parse_number("3,5", "do") != 35.0


@pytest.mark.parametrize("text", ["1,234", "12,500"])
def test_ambiguous_comma_refused_with_both_readings(text):
    with pytest.raises(InputError) as info:
        parse_number(text, "conductivity")
    assert info.value.code == "number.ambiguous_comma"
    assert text.replace(",", ".") in str(info.value) and text.replace(",", "") in str(info.value)


@pytest.mark.parametrize(
    "text,code",
    [
        ("1.234,5", "number.invalid"),
        ("abc", "number.invalid"),
        ("", "missing"),
        ("nan", "number.not_finite"),
        ("inf", "number.not_finite"),
    ],
)
def test_bad_numbers_refused(text, code):
    with pytest.raises(InputError) as info:
        parse_number(text, "temp")
    assert info.value.code == code
    assert str(info.value).startswith("Water temperature")


def test_bool_refused_by_parse_number():
    with pytest.raises(InputError) as info:
        parse_number(True, "do")
    assert info.value.code == "number.bool"


# ---- typed text kept beside the normalised value ------------------------------------------
def test_measure_keeps_text_value_and_unit():
    q = measure("pressure", "752 mmHg")
    assert q.text == "752 mmHg" and q.entered_value == 752.0 and q.entered_unit == "mmHg"
    assert q.unit == "hPa"
    # 760 mmHg ≈ 1013.25 hPa (US Standard Atmosphere 1976 units; the conventional mmHg differs from the torr by 1.4e-7)
    assert q.value == pytest.approx(752 * 1013.25 / 760, rel=1e-6)


def test_measure_fahrenheit_converted_and_kept():
    q = measure("temp", "59 F")
    assert q.value == pytest.approx(15.0, abs=1e-9)  # (59 − 32) × 5/9 = 15 °C (definition)
    assert q.text == "59 F" and q.entered_unit == "F"


def test_measure_decimal_comma_with_unit():
    q = measure("pressure", "1002,3 hPa")
    assert q.value == pytest.approx(1002.3) and q.text == "1002,3 hPa"


def test_measure_conductivity_ms_cm():
    q = measure("conductivity", "0.41 mS/cm")
    assert q.value == pytest.approx(410.0) and q.unit == "µS/cm"  # 1 mS/cm = 1000 µS/cm (definition)


def test_measure_do_percent_and_mg_l():
    assert measure("do", "96 %").unit == "%"
    assert measure("do", "8,4", default_unit="mg/L").value == pytest.approx(8.4)


def test_measure_bare_pressure_refused_listing_units():
    with pytest.raises(InputError) as info:
        measure("pressure", "1002")
    assert info.value.code == "unit.invalid"
    assert "Station pressure" in str(info.value) and "inHg" in str(info.value)


def test_water_temperature_looks_fahrenheit_message():
    with pytest.raises(InputError) as info:
        measure("temp", "64")
    msg = str(info.value)
    assert info.value.code == "temp.out_of_range"
    assert msg.startswith("Water temperature 64 °C is outside") and "°F" in msg


def test_pressure_in_inhg_typed_as_hpa_gets_hint():
    with pytest.raises(InputError) as info:
        measure("pressure", "29.9 hPa")
    assert info.value.code == "pressure.out_of_range" and "inHg" in str(info.value)


def test_do_unit_unknown():
    with pytest.raises(InputError) as info:
        measure("do", "8.4 ppb")
    assert info.value.code == "unit.invalid" and "mg/L" in str(info.value)


# ---- messages: every template renders our own text, never pydantic's ------------------------
@pytest.mark.parametrize("code", sorted(TEMPLATES))
def test_every_template_renders_without_placeholders(code):
    text = render(
        code,
        label="Water temperature",
        input="x",
        value=1.0,
        low=0.0,
        high=2.0,
        unit="°C",
        choices="a, b",
        max=10,
        a="1.2",
        b="12",
        detail="d",
        expected="hPa",
    )
    assert "{" not in text and "}" not in text and text[0].isupper()


def test_validation_messages_are_ours_not_pydantics():
    doc = doc_with()
    doc["stops"][0]["bottles"] = [{"label": " ", "kind": "jar", "collected_at": "2026-06-14T09:00:00Z"}]
    doc["stops"][0]["site_id"] = ""
    probs = problems(lambda: Trip.from_document(doc))
    texts = [p.message for p in probs]
    assert any(t == "Stop 1: Bottle 1: Bottle ID must not be blank." for t in texts)
    assert any(t.startswith("Stop 1: Bottle 1: Kind: “jar” is not one of") for t in texts)
    assert any(t == "Stop 1: Site must not be empty." for t in texts)
    for t in texts:  # pydantic's own wording never leaks
        assert "Input should" not in t and "validation error" not in t and "String should" not in t


def test_missing_required_field_message():
    doc = doc_with()
    del doc["started_at"]
    probs = problems(lambda: Trip.from_document(doc))
    assert probs[0].code == "missing" and probs[0].message == "Trip start time is required."


def test_reading_without_its_typed_part_is_not_called_missing():
    # A reading written by hand as {"value": 99, "unit": "°C"}: the temperature is there, so
    # "is required" would send the person looking for a value they did give.
    doc = doc_with()
    doc["stops"][0]["temp"] = {"value": 99.0, "unit": "°C"}
    probs = problems(lambda: Trip.from_document(doc))
    assert probs[0].code == "missing" and probs[0].field == "stops.0.temp.text"
    assert probs[0].message.startswith("Stop 1: Water temperature has no text;")
    assert all("is required" not in p.message for p in probs)


def test_end_before_start_message():
    probs = problems(lambda: Trip.from_document(doc_with(ended_at="2026-06-14T06:00:00-07:00")))
    assert probs[0].code == "time.end_before_start"


def test_stored_quantity_out_of_range_message():
    doc = doc_with()
    doc["stops"][0]["temp"]["value"] = 64.0
    probs = problems(lambda: Trip.from_document(doc))
    assert probs[0].message.startswith("Stop 1: Water temperature 64 °C is outside")
    assert "°F" in probs[0].message


def test_unit_mismatch_in_document():
    doc = doc_with()
    doc["stops"][0]["pressure"]["unit"] = "mmHg"
    probs = problems(lambda: Trip.from_document(doc))
    assert probs[0].code == "unit.mismatch" and "hPa" in probs[0].message


def test_site_elevation_range():
    probs = problems(lambda: Site(id="LK-09", name="Nowhere", elevation_m=9000.0))
    assert probs[0].code == "elevation.out_of_range" and "metres" in probs[0].message


def test_bottle_label_stripped():
    b = Bottle(label="  TV-1 ", kind="bod", collected_at=T0)
    assert b.label == "TV-1"


# ---- unknown fields and status ----------------------------------------------------------------
def test_unknown_fields_kept_top_level_and_nested():
    doc = doc_with(future_top={"x": 1})
    doc["stops"][0]["future_nested"] = [1, 2]
    trip = Trip.from_document(doc)
    assert trip.extra == {"future_top": {"x": 1}}
    again = trip.to_document()
    assert again["future_top"] == {"x": 1} and again["stops"][0]["future_nested"] == [1, 2]


def test_every_list_element_has_an_id():
    trip = make_trip([make_stop(bottles=[Bottle(label="A", kind="bod", collected_at=T0)])])
    assert len({trip.stops[0].id, trip.stops[0].bottles[0].id}) == 2
    assert all(len(x) == 36 for x in (trip.id, trip.stops[0].id, trip.stops[0].bottles[0].id))


def test_status_needs_attention_with_open_conflict():
    doc = make_trip().to_document()
    doc["conflicts"] = [
        {
            "path": "stops[x].notes",
            "detected_at": "2026-06-14T10:00:00Z",
            "sides": [{"device_id": "a", "value": "p"}, {"device_id": "b", "value": "q"}],
        }
    ]
    assert Trip.from_document(doc).status == "needs attention"
    doc["conflicts"][0]["resolved_at"] = "2026-06-14T11:00:00Z"
    assert Trip.from_document(doc).status == "in progress"
    doc["ended_at"] = "2026-06-14T20:00:00Z"
    assert Trip.from_document(doc).status == "ended"


# ---- JSON Schema published in the repository --------------------------------------------------
def test_committed_schema_equals_generated():
    assert SCHEMA_PATH.read_text(encoding="utf-8") == schema_text(), (
        "core/records/schema/trip.schema.json is stale: run `python -m core.records.models`"
    )


def test_schema_describes_trip_fields():
    schema = json.loads(SCHEMA_PATH.read_text(encoding="utf-8"))
    for name in ("id", "schema_version", "revision", "stops", "audit", "conflicts", "pre_calibration"):
        assert name in schema["properties"]
    assert "started_at" in schema["required"]


# ---- property: a decimal comma is a decimal point, never a thousands separator ------------------


@given(st.integers(min_value=0, max_value=99999), st.integers(min_value=0, max_value=99))
def test_decimal_comma_property(whole, frac):
    text = f"{whole},{frac:02d}"  # two decimals: never ambiguous
    assert parse_number(text, "do") == pytest.approx(whole + frac / 100, abs=1e-9)
    assert parse_number(text.replace(",", "."), "do") == parse_number(text, "do")


def test_store_leaves_other_parts_temp_files_alone(tmp_path):
    from core.store import DeviceStore

    root = tmp_path / "d"
    DeviceStore.open(root)
    theirs = root / ".outbox.json.x1.tmp"
    theirs.write_bytes(b"being written by sync")
    ours = root / ".sites.json.x2.tmp"
    ours.write_bytes(b"left by a crash")
    DeviceStore.open(root)
    assert theirs.exists() and not ours.exists()


def test_too_cold_gets_no_fahrenheit_hint():
    with pytest.raises(InputError) as info:
        measure("temp", "-40")
    assert "°F" not in str(info.value) and str(info.value).startswith("Water temperature −40 °C is outside")


def test_do_without_unit_asks_for_one():
    with pytest.raises(InputError) as info:
        measure("do", "8.4")
    assert "mg/L or %" in str(info.value)
