"""Property tests (hypothesis): physical monotonicity, round trips, inverses, continuity."""

from __future__ import annotations

import math

import gsw
import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from core.science.conductivity import conductivity_at_temp_us_cm, practical_salinity, specific_conductance_us_cm
from core.science.oxygen import METHODS, do_saturation_mg_l
from core.science.pressure import PRESSURE_UNITS, from_hpa, sea_level_to_station_hpa, station_to_sea_level_hpa, to_hpa
from core.science.temperature import c_to_f, f_to_c
from core.science.winkler import expected_titrant_ml, winkler_do_mg_l

temps = st.floats(0.0, 40.0)
sals = st.floats(0.0, 40.0)
press = st.floats(0.5 * 1013.25, 1.1 * 1013.25)
methods = st.sampled_from(METHODS)
SETTINGS = settings(max_examples=200, deadline=None)


@SETTINGS
@given(temps, temps, sals, press, methods)
def test_saturation_falls_with_temperature(t1, t2, s, p, m):
    # physics (Benson & Krause 1984): oxygen is less soluble in warmer water
    if abs(t1 - t2) < 1e-6:
        return
    lo, hi = sorted((t1, t2))
    assert do_saturation_mg_l(lo, p, s, m) > do_saturation_mg_l(hi, p, s, m)


@SETTINGS
@given(temps, sals, sals, press, methods)
def test_saturation_falls_with_salinity(t, s1, s2, p, m):
    # physics (salting out; Benson & Krause 1984, Garcia & Gordon 1992)
    if abs(s1 - s2) < 1e-6:
        return
    lo, hi = sorted((s1, s2))
    assert do_saturation_mg_l(t, p, lo, m) > do_saturation_mg_l(t, p, hi, m)


@SETTINGS
@given(temps, sals, press, press, methods)
def test_saturation_grows_with_pressure(t, s, p1, p2, m):
    # physics (Henry's law with the water-vapour and θ terms of 4500-O:I)
    if abs(p1 - p2) < 1e-6:
        return
    lo, hi = sorted((p1, p2))
    assert do_saturation_mg_l(t, lo, s, m) < do_saturation_mg_l(t, hi, s, m)


@SETTINGS
@given(st.lists(st.tuples(temps, press, sals), min_size=1, max_size=20), methods)
def test_scalar_and_array_paths_agree(points, m):
    # common practice: the math fast path and the numpy path are the same equation
    t, p, s = (np.array(c) for c in zip(*points, strict=True))
    arr = do_saturation_mg_l(t, p, s, m)
    for i, (ti, pi, si) in enumerate(points):
        assert math.isclose(arr[i], do_saturation_mg_l(ti, pi, si, m), rel_tol=1e-12)


@SETTINGS
@given(st.floats(1.0, 2000.0), st.sampled_from(PRESSURE_UNITS))
def test_pressure_units_round_trip(hpa, unit):
    # NIST SP 811 factors: converting out and back is the identity
    assert math.isclose(to_hpa(from_hpa(hpa, unit), unit), hpa, rel_tol=1e-12)


@SETTINGS
@given(st.floats(500.0, 1100.0), st.floats(-400.0, 5000.0))
def test_sea_level_round_trip(p, h):
    # US Standard Atmosphere 1976 ratio, forth and back
    assert math.isclose(station_to_sea_level_hpa(sea_level_to_station_hpa(p, h), h), p, rel_tol=1e-12)


@SETTINGS
@given(st.floats(-273.15, 1000.0))
def test_temperature_round_trip(c):
    # definition of the scales
    assert math.isclose(f_to_c(c_to_f(c)), c, rel_tol=1e-12, abs_tol=1e-9)


@SETTINGS
@given(st.floats(0.0, 100000.0), st.floats(0.0, 35.8), st.sampled_from(["linear", "iso7888"]))
def test_specific_conductance_round_trip(k, t, method):
    # Standard Methods 2510 B / ISO 7888: compensation and its inverse
    sc = specific_conductance_us_cm(k, t, method)
    assert math.isclose(conductivity_at_temp_us_cm(sc, t, method), k, rel_tol=1e-12, abs_tol=1e-9)


@SETTINGS
@given(st.floats(0.0, 50.0), st.floats(0.005, 0.1), st.floats(50.0, 300.0), st.floats(0.0, 4.0))
def test_winkler_and_inverse_agree(titrant, n, titrated, reagents):
    # Standard Methods 4500-O C: DO = V·N·8000/V_orig and V = DO·V_orig/(N·8000)
    do = winkler_do_mg_l(titrant, n, titrated, 300.0, reagents)
    if do > 70.0:
        return
    assert math.isclose(expected_titrant_ml(do, n, titrated, 300.0, reagents), titrant, rel_tol=1e-12, abs_tol=1e-12)


@SETTINGS
@given(st.floats(0.0, 35.0), st.floats(0.0, 500.0))
def test_pss78_continuous_across_two(t, p):
    # Hill et al. (1986) scaled as in gsw: the two formulas meet at S = 2 (no jump), for any t and p
    c2 = float(gsw.C_from_SP(2.0, t, p))  # conductivity at S = 2 (TEOS-10)
    below, at, above = practical_salinity(np.array([c2 * (1 - 1e-9), c2, c2 * (1 + 1e-9)]), t, p)
    assert abs(at - 2.0) < 1e-8
    assert below <= at + 1e-12 and at <= above + 1e-12
    assert above - below < 1e-7


@SETTINGS
@given(st.floats(0.0, 35.0), st.lists(st.floats(0.005, 60.0), min_size=2, max_size=10))
def test_pss78_increases_with_conductivity_and_matches_gsw(t, cs):
    # PSS-78 is monotone in conductivity; gsw.SP_from_C (TEOS-10) as the outside reference, from 5 µS/cm up
    # (below about 2 µS/cm the formula dips under 0 and gsw returns NaN: see test_conductivity)
    c = np.sort(np.array(cs))
    s = practical_salinity(c, t)
    assert np.all(np.diff(s) >= -1e-12)
    assert np.allclose(s, gsw.SP_from_C(c, t, 0.0), rtol=0, atol=1e-9)
