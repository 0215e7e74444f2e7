"""The app's numeric entry rules: the decimal comma is read, refused input is explained, nothing dropped.

Kivy's stock float filter turns "3,5" into 35 and "1e-3" into 13 (checked by hand against
kivy 2.3 TextInput, from memory); these are the cases our filter must get right (common practice).
"""

import pytest

from mobile.app.numeric import DecimalError, check_insert, parse_decimal


@pytest.mark.parametrize(
    "text,expected",
    [("3,5", 3.5), ("3.5", 3.5), ("12,40", 12.4), ("0", 0.0), ("-0,5", -0.5), (" 7 ", 7.0), (",5", 0.5)],
)
def test_parse_decimal_reads_comma_and_point(text, expected):
    assert parse_decimal(text) == pytest.approx(expected)


def test_parse_decimal_empty_is_none():
    assert parse_decimal("") is None
    assert parse_decimal("   ") is None


@pytest.mark.parametrize("text", ["1e-3", "3,5,1", "1.234,5", "abc", "-", ",", "nan", "inf", "3 5", "1,234"])
def test_parse_decimal_refuses_with_a_sentence(text):
    with pytest.raises(DecimalError) as err:
        parse_decimal(text, label="Water temperature")
    assert "Water temperature" in str(err.value)


def test_comma_is_accepted_while_typing():
    assert check_insert("3", 1, ",").accepted == ","
    assert not check_insert("3", 1, ",").refused


@pytest.mark.parametrize("current,insert", [("1", "e"), ("3,5", ","), ("3.5", ","), ("", "x"), ("12", " "), ("5", "-")])
def test_refused_insertions_say_why_and_insert_nothing(current, insert):
    check = check_insert(current, len(current), insert, label="Meter DO")
    assert check.refused
    assert check.accepted == ""
    assert check.message.startswith("Meter DO")


def test_a_pasted_exponent_is_refused_whole_not_filtered_to_digits():
    check = check_insert("", 0, "1e-3")
    assert check.refused and check.accepted == ""  # the stock filter would leave "13"


def test_minus_only_first_and_only_where_allowed():
    assert not check_insert("", 0, "-", allow_negative=True).refused
    assert check_insert("5", 1, "-", allow_negative=True).refused
    assert check_insert("", 0, "-", allow_negative=False).refused
