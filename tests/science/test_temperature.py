"""°C and °F, temperature text, and the hint that a °C value looks like °F."""
from __future__ import annotations

import numpy as np
import pytest

from core.science.temperature import c_to_f, f_to_c, fahrenheit_hint, parse_temperature


def test_fixed_points():
    # definition of the scales: 0 °C = 32 °F, 100 °C = 212 °F, −40 °C = −40 °F
    assert f_to_c(32.0) == 0.0
    assert f_to_c(212.0) == pytest.approx(100.0)
    assert c_to_f(-40.0) == pytest.approx(-40.0)
    assert np.allclose(c_to_f(np.array([0.0, 100.0])), [32.0, 212.0])


@pytest.mark.parametrize("text, default, want", [
    ("18.5", "C", 18.5), ("18,5 °C", "C", 18.5), ("65 F", "C", (65 - 32) * 5 / 9),
    ("65°F", "C", (65 - 32) * 5 / 9), ("65", "F", (65 - 32) * 5 / 9), ("291.65 K", "C", 18.5),
    ("-0.5 degC", "C", -0.5), ("18.5 c", "C", 18.5),
])
def test_parse_temperature(text, default, want):
    # definition of the scales (°F = °C·9/5 + 32; K = °C + 273.15)
    assert parse_temperature(text, default_unit=default) == pytest.approx(want)


@pytest.mark.parametrize("text, word", [("", "empty"), ("warm", "not a number"), ("18 Q", "unknown unit"),
                                        ("-500 F", "absolute zero"), ("1,2.5", "not a number")])
def test_parse_temperature_refuses(text, word):
    with pytest.raises(ValueError) as e:
        parse_temperature(text)
    assert word in str(e.value) and "\n" not in str(e.value)


def test_fahrenheit_hint():
    # common practice: 68 entered as °C (streams never run that hot) is 20 °C read as °F
    f = fahrenheit_hint(68.0)
    assert f is not None and f.code == "temp.looks_fahrenheit" and "20.0 °C" in f.message
    for t in (0.0, 18.5, 35.0, 40.0, 110.0):
        assert fahrenheit_hint(t) is None
    with pytest.raises(ValueError, match="^temp_c"):
        fahrenheit_hint(float("nan"))
