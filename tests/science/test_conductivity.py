"""Conductivity units, specific conductance, and PSS-78 salinity against UNESCO check values and gsw."""

from __future__ import annotations

import gsw
import numpy as np
import pytest

from core.science.conductivity import (
    C3515_MS_CM,
    conductivity_at_temp_us_cm,
    iso7888_f25,
    practical_salinity,
    salinity_from_specific_conductance,
    specific_conductance_us_cm,
)
from tests.science._refdata import ids, rows


@pytest.mark.parametrize("row", rows("pss78_check.csv"), ids=ids("pss78_check.csv", "conductivity_ratio"))
def test_pss78_unesco_check_values(row):
    # source: the row's `source` column; the check temperatures are IPTS-68, so convert to ITS-90 first
    t90 = float(row["temp_c_ipts68"]) / 1.00024
    got = practical_salinity(float(row["conductivity_ratio"]) * C3515_MS_CM, t90, float(row["pressure_dbar"]))
    assert abs(got - float(row["salinity"])) <= float(row["tolerance"])


# Conductivities from fresh streams (0.05–2 mS/cm = 50–2000 µS/cm) up to seawater, in mS/cm
GRID_C = np.concatenate(
    [np.array([0.01, 0.05, 0.1, 0.2, 0.41, 0.5, 1.0, 1.5, 2.0]), np.array([3.0, 5.0, 10.0, 20.0, 30.0, 42.914, 55.0])]
)
GRID_T = np.array([0.0, 2.0, 5.0, 10.0, 15.0, 18.5, 20.0, 25.0, 30.0, 35.0])
GRID_P = np.array([0.0, 10.0, 1000.0])


def test_against_gsw_sp_from_c_grid():
    # source: gsw.SP_from_C (TEOS-10 GSW 3.6; PSS-78 with the Hill et al. 1986 extension below 2)
    c, t, p = np.meshgrid(GRID_C, GRID_T, GRID_P, indexing="ij")
    got = practical_salinity(c, t, p)
    want = gsw.SP_from_C(c, t, p)
    assert np.max(np.abs(got - want)) <= 1e-9


@pytest.mark.parametrize("us_cm", [50.0, 100.0, 250.0, 410.0, 800.0, 1500.0, 2000.0])
@pytest.mark.parametrize("temp_c", [1.0, 12.0, 24.0])
def test_fresh_stream_conductivities_against_gsw(us_cm, temp_c):
    # source: gsw.SP_from_C (TEOS-10) in the fresh-stream range, scalar path
    got = practical_salinity(us_cm / 1000.0, temp_c)
    assert type(got) is float
    assert got == pytest.approx(float(gsw.SP_from_C(us_cm / 1000.0, temp_c, 0.0)), abs=1e-10)
    assert 0.0 < got < 2.0


def test_continuous_across_two():
    # Hill, Dauphinee & Woods (1986) as scaled in gsw: equals PSS-78 at S = 2
    for t in (0.0, 10.0, 25.0):
        c2 = float(gsw.C_from_SP(2.0, t, 0.0))  # conductivity at S = 2 (TEOS-10)
        below, at, above = practical_salinity(np.array([c2 * (1 - 1e-9), c2, c2 * (1 + 1e-9)]), t)
        assert at == pytest.approx(2.0, abs=1e-9)
        assert abs(above - below) < 1e-7  # no step where the formula changes


def test_salinity_from_specific_conductance():
    # source: gsw.SP_from_C at 25 °C (TEOS-10)
    for sc in (50.0, 410.0, 2000.0, 53000.0):
        assert salinity_from_specific_conductance(sc) == pytest.approx(
            float(gsw.SP_from_C(sc / 1000.0, 25.0, 0.0)), abs=1e-10
        )
    a = salinity_from_specific_conductance(np.array([100.0, 1000.0]))
    assert a.shape == (2,)


def test_linear_compensation():
    # Standard Methods 2510 B: κ25 = κt / [1 + α(t − 25)], α = 0.0191 /°C (KCl) [from memory]
    assert specific_conductance_us_cm(410.0, 25.0) == pytest.approx(410.0)
    assert specific_conductance_us_cm(410.0, 15.0) == pytest.approx(410.0 / (1 - 0.191))
    assert specific_conductance_us_cm(410.0, 15.0, alpha=0.0187) == pytest.approx(
        410.0 / (1 - 0.187)
    )  # Hayashi 2004 mean
    assert conductivity_at_temp_us_cm(specific_conductance_us_cm(333.0, 7.0), 7.0) == pytest.approx(333.0)


@pytest.mark.parametrize(
    "t, f", [(0, 1.918), (5, 1.643), (10, 1.428), (15, 1.256), (20, 1.116), (25, 1.000), (30, 0.903), (35, 0.822)]
)
def test_iso7888_nodes(t, f):
    # source: ISO 7888 / EN 27888 Table 1 (values above 12 °C from memory), core/science/data/iso7888_f25.csv
    assert iso7888_f25(float(t)) == pytest.approx(f, abs=1e-12)
    assert specific_conductance_us_cm(100.0, float(t), method="iso7888") == pytest.approx(100.0 * f)


def test_iso7888_between_nodes_is_smooth_and_monotone():
    # ISO 7888 Table 1 decreases smoothly with temperature; interpolated values stay between the nodes
    t = np.linspace(0.0, 35.9, 360)
    f = iso7888_f25(t)
    assert np.all(np.diff(f) < 0)
    assert iso7888_f25(12.5) < 1.428 and iso7888_f25(12.5) > 1.256
    assert conductivity_at_temp_us_cm(
        specific_conductance_us_cm(250.0, 7.3, "iso7888"), 7.3, "iso7888"
    ) == pytest.approx(250.0)
    with pytest.raises(ValueError, match="^temp_c.*linear"):
        iso7888_f25(36.5)


def test_bad_values_refused():
    with pytest.raises(ValueError, match="^conductivity_ms_cm"):
        practical_salinity(-0.1, 10.0)
    with pytest.raises(ValueError, match="^conductivity_us_cm"):
        specific_conductance_us_cm(float("nan"), 10.0)
    with pytest.raises(ValueError, match="^method"):
        specific_conductance_us_cm(10.0, 10.0, method="cubic")
    with pytest.raises(ValueError, match="^alpha"):
        specific_conductance_us_cm(10.0, 10.0, alpha=-0.02)


def test_nearly_pure_water_is_computed_not_clamped():
    # gsw.SP_from_C returns NaN where PSS-78 with Hill et al. dips below 0 (< ~2 µS/cm); we return the
    # computed value, and match gsw wherever gsw gives a number
    c = np.array([0.0005, 0.001, 0.002, 0.005])
    ours = practical_salinity(c, 20.0)
    ref = gsw.SP_from_C(c, 20.0, 0.0)
    assert np.all(np.isfinite(ours)) and ours[0] < 0 and ours[0] > -0.001
    ok = np.isfinite(ref)
    assert ok.sum() >= 2 and np.allclose(ours[ok], ref[ok], rtol=0, atol=1e-10)
