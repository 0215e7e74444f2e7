"""The thin input-check layer every science function goes through (others import it too)."""

from __future__ import annotations

import numpy as np
import pytest

from core.science._validate import choice, is_plain_scalar, range_text, real


def test_scalars_come_back_as_float():
    assert real(3, "x") == 3.0 and type(real(3, "x")) is float
    assert type(real(np.float32(2.5), "x")) is float
    assert type(real(np.array(2.5), "x")) is float  # 0-d arrays count as scalars
    assert is_plain_scalar(1.0) and is_plain_scalar(1) and not is_plain_scalar(True)
    assert not is_plain_scalar(np.float64(1.0))


def test_arrays_come_back_as_float64_without_copy():
    a = np.array([1.0, 2.0])
    assert real(a, "x") is a
    b = real([1, 2, 3], "x")
    assert isinstance(b, np.ndarray) and b.dtype == np.float64
    assert real(np.array([]), "x").size == 0


@pytest.mark.parametrize(
    "bad, words",
    [
        (float("nan"), ["x = nan", "not a finite number"]),
        (float("inf"), ["not a finite number"]),
        (True, ["true/false"]),
        ("3", ["text"]),
        (None, ["missing"]),
        ([1.0, "a"], ["not a number"]),
        (np.array([1.0, np.inf, 2.0]), ["x[1]", "not a finite number"]),
        ({"a": 1}, ["not a number"]),
    ],
)
def test_refusals_name_the_input(bad, words):
    with pytest.raises(ValueError) as e:
        real(bad, "x", lo=0.0, hi=10.0, unit="mg/L")
    msg = str(e.value)
    assert msg.startswith("x") and "accepted: 0 to 10 mg/L" in msg and "\n" not in msg
    for w in words:
        assert w in msg


def test_limits():
    assert real(0.0, "x", lo=0.0) == 0.0
    with pytest.raises(ValueError, match="above 0"):
        real(0.0, "x", lo=0.0, lo_open=True)
    with pytest.raises(ValueError, match=r"x\[2\] = 11"):
        real(np.array([1.0, 2.0, 11.0]), "x", hi=10.0)
    with pytest.raises(ValueError, match=r"x\[0\] = -1"):
        real(np.array([-1.0, 2.0]), "x", lo=0.0)
    assert range_text(None, None, "hPa") == "any finite number hPa"
    assert range_text(0.0, None, "hPa", lo_open=True) == "above 0 hPa"


def test_choice():
    assert choice(" Garcia-Gordon ", "method", ("benson-krause", "garcia-gordon")) == "garcia-gordon"
    with pytest.raises(ValueError, match="^method = 'x'.*accepted: a, b"):
        choice("x", "method", ("a", "b"))
    with pytest.raises(ValueError, match="^method"):
        choice(None, "method", ("a",))
