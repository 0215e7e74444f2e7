"""DO saturation against published check values and the TEOS-10 reference library (gsw)."""

from __future__ import annotations

import math

import gsw
import numpy as np
import pytest

from core.science import oxygen
from core.science.oxygen import (
    do_mg_l_from_percent,
    do_saturation_mg_l,
    o2_solubility_umol_kg,
    percent_saturation,
    pressure_factor,
    saturation_range_flags,
    seawater_density_kg_m3,
    theta,
    water_vapour_pressure_atm,
)
from tests.science._refdata import ids, rows

ATM = 1013.25
BK_ROWS = rows("bk_table.csv")


@pytest.mark.parametrize("row", BK_ROWS, ids=ids("bk_table.csv", "temp_c", "salinity", "pressure_atm"))
def test_benson_krause_table(row):
    # source: the row's `source` column (Benson & Krause 1984 / Standard Methods 4500-O:I)
    got = do_saturation_mg_l(float(row["temp_c"]), float(row["pressure_atm"]) * ATM, float(row["salinity"]))
    assert abs(got - float(row["do_sat_mg_l"])) <= float(row["tolerance_mg_l"])


def test_table_through_the_array_path_matches_too():
    # source: same rows as above (bk_table.csv); the vectorised path must agree with the table as well
    t = np.array([float(r["temp_c"]) for r in BK_ROWS])
    s = np.array([float(r["salinity"]) for r in BK_ROWS])
    p = np.array([float(r["pressure_atm"]) * ATM for r in BK_ROWS])
    want = np.array([float(r["do_sat_mg_l"]) for r in BK_ROWS])
    tol = np.array([float(r["tolerance_mg_l"]) for r in BK_ROWS])
    got = do_saturation_mg_l(t, p, s)
    assert isinstance(got, np.ndarray) and got.shape == t.shape
    assert np.all(np.abs(got - want) <= tol)


def test_fresh_water_20c_sea_level_about_9_1():
    # common practice (fact of the trade): fresh water at 20 °C and sea-level pressure holds about 9.1 mg/L
    assert do_saturation_mg_l(20.0) == pytest.approx(9.1, abs=0.05)
    assert do_saturation_mg_l(20.0, method="garcia-gordon") == pytest.approx(9.1, abs=0.05)


def _gsw_mg_l(temp_c, sp):
    # reference: gsw.O2sol_SP_pt (TEOS-10; Garcia & Gordon 1992, B&K-data column, µmol/kg) times
    # TEOS-10 in-situ density at 0 dbar (gsw.rho_t_exact) times 31.9988 mg/mol
    sa = gsw.SA_from_SP(sp, 0.0, 0.0, 0.0)
    return gsw.O2sol_SP_pt(sp, temp_c) * gsw.rho_t_exact(sa, temp_c, 0.0) / 1000.0 * 0.0319988


GRID_T, GRID_S = np.meshgrid(np.arange(0.0, 40.01, 2.0), np.arange(0.0, 40.01, 4.0))


def test_garcia_gordon_umol_kg_equals_gsw():
    # source: gsw.O2sol_SP_pt (TEOS-10 GSW 3.6); same equation and same IPTS-68 conversion -> rounding only
    got = o2_solubility_umol_kg(GRID_T, GRID_S)
    assert np.allclose(got, gsw.O2sol_SP_pt(GRID_S, GRID_T), rtol=1e-12, atol=0)
    assert o2_solubility_umol_kg(20.0) == pytest.approx(284.625, abs=0.0005)  # team science reference §2


def test_garcia_gordon_mg_l_against_gsw_grid():
    # source: gsw.O2sol_SP_pt × gsw.rho_t_exact; tolerance 0.0002 mg/L covers EOS-80 vs TEOS-10 density
    # (≤ 0.01 kg/m³, i.e. 1e-5 relative)
    got = do_saturation_mg_l(GRID_T, salinity=GRID_S, method="garcia-gordon")
    assert np.max(np.abs(got - _gsw_mg_l(GRID_T, GRID_S))) <= 0.0002


def test_benson_krause_mg_l_against_gsw_grid():
    # source: gsw.O2sol_SP_pt × gsw.rho_t_exact; Garcia & Gordon fitted Benson & Krause's data, so the two
    # methods differ by the fit residual: tolerance 0.005 mg/L (about 0.05 %), 0–40 °C, S 0–40
    got = do_saturation_mg_l(GRID_T, salinity=GRID_S)
    assert np.max(np.abs(got - _gsw_mg_l(GRID_T, GRID_S))) <= 0.005


@pytest.mark.parametrize("p_atm", [0.5, 0.6, 0.8, 0.9, 1.0, 1.1])
def test_pressure_correction_both_methods_same_factor(p_atm):
    # source: Benson & Krause (1984) / 4500-O:I — the pressure factor is independent of the 1-atm method;
    # at 1 atm it is exactly 1, and it is P·(1−Pwv/P)(1−θP)/[(1−Pwv)(1−θ)] as written in the standard
    t = 15.0
    pwv = water_vapour_pressure_atm(t)
    th = theta(t)
    written = p_atm * (1 - pwv / p_atm) * (1 - th * p_atm) / ((1 - pwv) * (1 - th))
    assert pressure_factor(t, p_atm * ATM) == pytest.approx(written, rel=1e-13)
    for method in oxygen.METHODS:
        c1 = do_saturation_mg_l(t, ATM, 0.0, method)
        assert do_saturation_mg_l(t, p_atm * ATM, 0.0, method) == pytest.approx(c1 * written, rel=1e-12)


def test_pressure_against_gsw_at_reduced_pressure():
    # source: gsw.O2sol_SP_pt at 1 atm (TEOS-10) scaled by the 4500-O:I pressure factor written out here
    # from the standard's equations; tolerance as for the 1-atm grid (0.005 mg/L, B&K vs G&G fit)
    t = np.arange(0.0, 40.1, 5.0)
    for p_atm in (0.6, 0.75, 0.95):
        T = t + 273.15
        pwv = np.exp(11.8571 - 3840.70 / T - 216961 / T**2)
        th = 0.000975 - 1.426e-5 * t + 6.436e-8 * t**2
        f = (p_atm - pwv) * (1 - th * p_atm) / ((1 - pwv) * (1 - th))
        ref = _gsw_mg_l(t, 0.0 * t) * f
        assert np.max(np.abs(do_saturation_mg_l(t, p_atm * ATM) - ref)) <= 0.005


def test_water_vapour_pressure_and_theta_values():
    # source: team science reference §1 — θ(20 °C) = 0.000716 with t in °C (0.00233 if kelvin is used)
    assert theta(20.0) == pytest.approx(0.000716, abs=5e-7)
    # source: steam tables give 2.339 kPa (0.02308 atm) at 20 °C [from memory]; the B&K fit is within 0.5 %
    assert water_vapour_pressure_atm(20.0) == pytest.approx(0.02308, rel=0.005)


def test_density_against_gsw():
    # source: gsw.rho_t_exact (TEOS-10) at 0 dbar; EOS-80 and TEOS-10 agree within 0.01 kg/m³ here
    sa = gsw.SA_from_SP(GRID_S, 0.0, 0.0, 0.0)
    assert np.max(np.abs(seawater_density_kg_m3(GRID_T, GRID_S) - gsw.rho_t_exact(sa, GRID_T, 0.0))) <= 0.01
    # source: UNESCO (1983) Tech. Pap. Mar. Sci. 44 check values at p = 0 [from memory]: S=35, t68=25 ->
    # 1023.34306; S=0, t68=5 -> 999.96675
    assert seawater_density_kg_m3(25.0 / 1.00024, 35.0) == pytest.approx(1023.34306, abs=1e-4)
    assert seawater_density_kg_m3(5.0 / 1.00024, 0.0) == pytest.approx(999.96675, abs=1e-4)


def test_scalar_in_scalar_out_and_array_broadcast():
    # common practice: Python floats give floats; arrays broadcast against scalars; both paths agree
    # (the expected value is the published table, bk_table.csv: 10 °C, S 0 -> 11.288)
    assert type(do_saturation_mg_l(10.0)) is float
    a = do_saturation_mg_l(np.array([10.0, 10.0]), np.array([ATM, 0.9 * ATM]), 0.0)
    assert a.shape == (2,) and abs(a[0] - 11.288) <= 0.002
    s = do_saturation_mg_l(10.0, ATM, np.array([0.0, 35.0]), method="garcia-gordon")
    assert s.shape == (2,)
    assert do_saturation_mg_l(np.float64(10.0)) == pytest.approx(11.288, abs=0.002)
    g = do_saturation_mg_l(np.array([[0.0], [40.0]]), np.array([800.0, 900.0, 1000.0]), 5.0)
    assert g.shape == (2, 3)
    for i, t in enumerate((0.0, 40.0)):
        for j, p in enumerate((800.0, 900.0, 1000.0)):
            assert g[i, j] == pytest.approx(do_saturation_mg_l(t, p, 5.0), rel=1e-13)


@pytest.mark.parametrize(
    "kw, name",
    [
        (dict(temp_c=float("nan")), "temp_c"),
        (dict(temp_c=math.inf), "temp_c"),
        (dict(temp_c=20.0, pressure_hpa=-5.0), "pressure_hpa"),
        (dict(temp_c=20.0, pressure_hpa=0.0), "pressure_hpa"),
        (dict(temp_c=20.0, salinity=-0.1), "salinity"),
        (dict(temp_c=-40.0), "temp_c"),
        (dict(temp_c=20.0, method="winkler"), "method"),
        (dict(temp_c="20"), "temp_c"),
        (dict(temp_c=np.array([10.0, np.nan])), "temp_c[1]"),
        (dict(temp_c=80.0, pressure_hpa=400.0), "pressure_hpa"),  # below water-vapour pressure at 80 °C
    ],
)
def test_bad_inputs_raise_naming_the_input(kw, name):
    # common practice: impossible inputs are refused with the input's name; nothing is clamped
    with pytest.raises(ValueError) as e:
        do_saturation_mg_l(**kw)
    assert str(e.value).startswith(name) and "accepted" in str(e.value)


def test_out_of_range_computes_and_flags():
    # team science reference §1: outside 0–40 °C, S 0–40, 0.5–1.1 atm compute and flag, never clamp
    c45 = do_saturation_mg_l(45.0)
    assert c45 < do_saturation_mg_l(40.0)  # computed, not clamped at 40 °C
    codes = {f.code for f in saturation_range_flags(45.0, 450.0, 41.0)}
    assert codes == {
        "saturation.temp_out_of_range",
        "saturation.pressure_out_of_range",
        "saturation.salinity_out_of_range",
    }
    assert saturation_range_flags(20.0, 1000.0, 0.2) == []
    assert saturation_range_flags(0.0, 0.5 * ATM, 40.0) == []  # the limits themselves are inside
    assert [f.code for f in saturation_range_flags(np.array([5.0, -1.0]), 1000.0, 0.0)] == [
        "saturation.temp_out_of_range"
    ]


def test_percent_saturation_and_back():
    # USGS National Field Manual A6.2: % saturation = 100 · DO / Cp
    sat = do_saturation_mg_l(20.0)
    assert percent_saturation(sat, sat) == pytest.approx(100.0)
    assert percent_saturation(4.546, 9.092) == pytest.approx(50.0)
    assert do_mg_l_from_percent(50.0, 9.092) == pytest.approx(4.546)
    with pytest.raises(ValueError, match="^do_mg_l"):
        percent_saturation(-1.0, 9.0)
    with pytest.raises(ValueError, match="^do_sat_mg_l"):
        percent_saturation(8.0, 0.0)
    with pytest.raises(ValueError, match="^do_percent"):
        do_mg_l_from_percent(-3.0, 9.0)


def test_large_arrays_take_the_blocked_path_and_agree():
    # common practice: the cache-blocked path is the same equation; table check 20 °C, S 0 -> 9.092 (4500-O:I)
    n = oxygen._CHUNK * 3 + 17
    rng = np.random.default_rng(7)
    t = rng.uniform(0.0, 40.0, n)
    t[n - 1] = 20.0
    p = rng.uniform(600.0, 1100.0, n)
    p[n - 1] = ATM
    s = rng.uniform(0.0, 40.0, n)
    s[n - 1] = 0.0
    for method in oxygen.METHODS:
        big = do_saturation_mg_l(t, p, s, method)
        assert big.shape == (n,)
        for i in (0, oxygen._CHUNK - 1, oxygen._CHUNK, 2 * oxygen._CHUNK + 5, n - 1):
            assert big[i] == pytest.approx(do_saturation_mg_l(float(t[i]), float(p[i]), float(s[i]), method), rel=1e-13)
        assert abs(big[n - 1] - 9.092) <= 0.002
    two_d = do_saturation_mg_l(t[: 2 * 40000].reshape(2, 40000), 1000.0, 0.0)
    assert two_d.shape == (2, 40000) and two_d[1, 5] == pytest.approx(do_saturation_mg_l(float(t[40005]), 1000.0))


def test_no_air_error_names_the_right_index_in_a_large_array():
    n = oxygen._CHUNK * 2 + 10
    t = np.full(n, 20.0)
    t[oxygen._CHUNK + 3] = 85.0
    p = np.full(n, 500.0)  # below the water-vapour pressure at 85 °C (about 578 hPa)
    with pytest.raises(ValueError, match=rf"^pressure_hpa\[{oxygen._CHUNK + 3}\]"):
        do_saturation_mg_l(t, p)
