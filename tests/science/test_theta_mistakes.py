"""The two θ mistakes in circulation (θ from kelvin; θ constants shifted tenfold) must fail our checks."""

from __future__ import annotations

import numpy as np
import pytest

from core.science import oxygen
from tests.science._refdata import rows

ATM = 1013.25
# The pressure rows of bk_table.csv (source: Benson & Krause 1984 pressure correction, team science reference §1)
PRESSURE_ROWS = [r for r in rows("bk_table.csv") if float(r["pressure_atm"]) != 1.0]


def _theta_kelvin_scalar(t):
    T = t + 273.15
    return 0.000975 - 1.426e-5 * T + 6.436e-8 * T * T


def _theta_kelvin_array(t):
    T = t + 273.15
    return 0.000975 - 1.426e-5 * T + 6.436e-8 * T * T


def _times(k):
    return (
        lambda t: k * (0.000975 - 1.426e-5 * t + 6.436e-8 * t * t),
        lambda t: k * (0.000975 - 1.426e-5 * t + 6.436e-8 * t * t),
    )


def _passes_pressure_checks(theta_value: bool = True) -> bool:
    # team science reference §1: θ(20 °C) = 0.000716 (t in °C), and the two pressure examples
    ok = abs(oxygen.theta(20.0) - 0.000716) <= 5e-7 if theta_value else True
    for r in PRESSURE_ROWS:
        args = (float(r["temp_c"]), float(r["pressure_atm"]) * ATM, float(r["salinity"]))
        want, tol = float(r["do_sat_mg_l"]), float(r["tolerance_mg_l"])
        scalar = oxygen.do_saturation_mg_l(*args)
        array = oxygen.do_saturation_mg_l(np.array([args[0]]), np.array([args[1]]), args[2])[0]
        ok &= abs(scalar - want) <= tol and abs(array - want) <= tol
    return bool(ok)


def test_correct_theta_passes():
    # team science reference §1: θ(20 °C) = 0.000716, with t in °C
    assert oxygen.theta(20.0) == pytest.approx(0.000716, abs=5e-7)
    assert _passes_pressure_checks() and _passes_pressure_checks(theta_value=False)


def test_theta_in_kelvin_would_fail(monkeypatch):
    # team science reference §1: the kelvin mistake gives θ(20) = 0.00233 instead of 0.000716
    assert _theta_kelvin_scalar(20.0) == pytest.approx(0.00233, abs=5e-6)
    monkeypatch.setattr(oxygen, "_theta_scalar", _theta_kelvin_scalar)
    monkeypatch.setattr(oxygen, "_theta_array", _theta_kelvin_array)
    assert not _passes_pressure_checks()
    assert not _passes_pressure_checks(theta_value=False)  # the pressure examples alone catch it too


@pytest.mark.parametrize("k", [10.0, 0.1])
def test_theta_shifted_tenfold_would_fail(monkeypatch, k):
    # team science reference §1: θ constants shifted by a factor of ten (either way)
    s, a = _times(k)
    monkeypatch.setattr(oxygen, "_theta_scalar", s)
    monkeypatch.setattr(oxygen, "_theta_array", a)
    assert not _passes_pressure_checks()
    assert not _passes_pressure_checks(theta_value=False)  # the pressure examples alone catch it too


def test_checks_see_theta_at_all(monkeypatch):
    # with θ left out entirely the pressure examples must also fail: the tolerance is tight enough to see θ
    monkeypatch.setattr(oxygen, "_theta_scalar", lambda t: 0.0)
    monkeypatch.setattr(oxygen, "_theta_array", lambda t: 0.0 * t)
    assert not _passes_pressure_checks(theta_value=False)


def _theta_with(c0, c1, c2):
    return (lambda t: c0 + c1 * t + c2 * t * t), (lambda t: c0 + c1 * t + c2 * t * t)


SHIFTS = [
    (0.000975 * k if i == 0 else 0.000975, -1.426e-5 * k if i == 1 else -1.426e-5, 6.436e-8 * k if i == 2 else 6.436e-8)
    for i in range(3)
    for k in (10.0, 0.1)
]


@pytest.mark.parametrize("consts", SHIFTS, ids=[f"c{i}x{k:g}" for i in range(3) for k in (10.0, 0.1)])
def test_one_theta_constant_shifted_would_fail(monkeypatch, consts):
    # team science reference §1: a single θ constant with its decimal point shifted
    s, a = _theta_with(*consts)
    monkeypatch.setattr(oxygen, "_theta_scalar", s)
    monkeypatch.setattr(oxygen, "_theta_array", a)
    assert not _passes_pressure_checks()
