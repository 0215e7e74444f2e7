"""°C and °F, temperature text, and the hint that a °C value looks like °F."""

from __future__ import annotations

import numpy as np
import pytest

from core.science.temperature import c_to_f, f_to_c, fahrenheit_hint


def test_fixed_points():
    # definition of the scales: 0 °C = 32 °F, 100 °C = 212 °F, −40 °C = −40 °F
    assert f_to_c(32.0) == 0.0
    assert f_to_c(212.0) == pytest.approx(100.0)
    assert c_to_f(-40.0) == pytest.approx(-40.0)
    assert np.allclose(c_to_f(np.array([0.0, 100.0])), [32.0, 212.0])


def test_fahrenheit_hint():
    # common practice: 68 entered as °C (streams never run that hot) is 20 °C read as °F
    f = fahrenheit_hint(68.0)
    assert f is not None and f.code == "temp.looks_fahrenheit" and "20.0 °C" in f.message
    for t in (0.0, 18.5, 32.0, 110.0):
        assert fahrenheit_hint(t) is None
    # common practice: 35 typed as °C may be winter water in °F (35 °F = 1.7 °C): a gentle note only
    n = fahrenheit_hint(35.0)
    assert n is not None and n.code == "temp.maybe_fahrenheit" and n.severity.value == "note"
    assert "1.7 °C" in n.message and fahrenheit_hint(40.0).code == "temp.maybe_fahrenheit"
    # 40 °F is 4.4 °C: the note gives that value and no range it would contradict ("0–4 °C")
    top = fahrenheit_hint(40.0).message
    assert "4.4 °C" in top and "0–4 °C" not in top
    with pytest.raises(ValueError, match="^temp_c"):
        fahrenheit_hint(float("nan"))
