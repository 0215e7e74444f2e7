"""Dissolved-oxygen saturation (Benson & Krause 1984; Garcia & Gordon 1992) and percent saturation."""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from core.flags import Flag, Severity
from core.science._validate import choice, is_plain_scalar, real

__all__ = [
    "METHODS",
    "VALID_TEMP_C",
    "VALID_SALINITY",
    "VALID_PRESSURE_ATM",
    "do_saturation_mg_l",
    "percent_saturation",
    "do_mg_l_from_percent",
    "PERCENT_BASES",
    "meter_percent_to_mg_l",
    "saturation_range_flags",
    "o2_solubility_umol_kg",
    "seawater_density_kg_m3",
    "water_vapour_pressure_atm",
    "theta",
    "pressure_factor",
]

METHODS = ("benson-krause", "garcia-gordon")

#: Ranges over which the equations were fitted (Benson & Krause 1984; Standard Methods 4500-O).
#: Outside them the functions still compute and :func:`saturation_range_flags` says so.
VALID_TEMP_C = (0.0, 40.0)
VALID_SALINITY = (0.0, 40.0)
VALID_PRESSURE_ATM = (0.5, 1.1)

_ATM_HPA = 1013.25
_MG_PER_UMOL_O2 = 0.0319988  # molar mass of O2, 31.9988 g/mol
_T68_PER_T90 = 1.00024  # IPTS-68 from ITS-90 near 0–40 °C (Saunders 1990)

# Domain in which a value is possible at all (outside: ValueError). Liquid water under air.
_TEMP_DOMAIN: dict[str, Any] = dict(
    lo=-5.0, hi=90.0, unit="°C", note=" (liquid water under air; the equations are fitted to 0–40 °C)"
)
_SAL_DOMAIN: dict[str, Any] = dict(
    lo=0.0, hi=70.0, unit="", note=" (practical salinity; the equations are fitted to 0–40)"
)
_P_DOMAIN: dict[str, Any] = dict(
    lo=0.0,
    hi=1500.0,
    lo_open=True,
    unit="hPa",
    note=" (station air pressure; the equations are fitted to 507–1115 hPa)",
)

# Benson & Krause (1984) as in Standard Methods 4500-O Table 4500-O:I, mg/L, 1 atm.
_BK0, _BK1, _BK2, _BK3, _BK4 = -139.34411, 1.575701e5, -6.642308e7, 1.243800e10, -8.621949e11
_BKS0, _BKS1, _BKS2 = 1.7674e-2, -1.0754e1, 2.1407e3
# Water-vapour pressure (atm) and the second virial term theta (1/atm), same source.
_WV0, _WV1, _WV2 = 11.8571, -3840.70, -216961.0
_TH0, _TH1, _TH2 = 0.000975, -1.426e-5, 6.436e-8

# Garcia & Gordon (1992) with the 1993 erratum, µmol/kg, "Benson & Krause data" column.
_GA = (5.80871, 3.20291, 4.17887, 5.10006, -9.86643e-2, 3.80369)
_GB = (-7.01577e-3, -7.70028e-3, -1.13864e-2, -9.51519e-3)
_GC0 = -2.75915e-7


# --- pieces of the pressure correction ---------------------------------------------------------


def _theta_scalar(t: float) -> float:
    # θ = 0.000975 − 1.426e-5 t + 6.436e-8 t², t in °C (NOT kelvin)  [4500-O:I]
    return _TH0 + t * (_TH1 + t * _TH2)


def _theta_array(t: np.ndarray) -> np.ndarray:
    th = t * _TH2
    th += _TH1
    th *= t
    th += _TH0
    return th


def theta(temp_c):
    """Second virial coefficient term θ of oxygen used in the pressure correction, 1/atm.

    θ = 0.000975 − 1.426e-5·t + 6.436e-8·t², with t in °C (0.000716 at 20 °C; evaluating it with
    kelvin gives 0.00233, a mistake in circulation).

    Parameters
    ----------
    temp_c : float or array_like
        Water temperature, °C (−5 to 90).

    References
    ----------
    Benson & Krause (1984); Standard Methods 4500-O, Table 4500-O:I, footnote equations.
    """
    t = real(temp_c, "temp_c", **_TEMP_DOMAIN)
    return _theta_scalar(t) if is_plain_scalar(t) else _theta_array(t)


def water_vapour_pressure_atm(temp_c):
    """Vapour pressure of fresh water, atm: ln Pwv = 11.8571 − 3840.70/T − 216961/T², T in K.

    Parameters
    ----------
    temp_c : float or array_like
        Water temperature, °C (−5 to 90).

    Returns
    -------
    float or numpy.ndarray
        Water-vapour pressure, atm (0.02313 at 20 °C).

    References
    ----------
    Benson & Krause (1984); Standard Methods 4500-O, Table 4500-O:I.
    """
    t = real(temp_c, "temp_c", **_TEMP_DOMAIN)
    if is_plain_scalar(t):
        x = 1.0 / (t + 273.15)
        return math.exp(_WV0 + x * (_WV1 + x * _WV2))
    x = 1.0 / (t + 273.15)
    return np.exp(_WV0 + x * (_WV1 + x * _WV2))


def pressure_factor(temp_c, pressure_hpa):
    """Ratio of the saturation concentration at station pressure P to that at 1 atm.

    F = P·(1 − Pwv/P)(1 − θP) / [(1 − Pwv)(1 − θ)] = (P − Pwv)(1 − θP) / [(1 − Pwv)(1 − θ)],
    P and Pwv in atm, θ from :func:`theta`.

    Parameters
    ----------
    temp_c : float or array_like
        Water temperature, °C (−5 to 90).
    pressure_hpa : float or array_like
        Station (true, not sea-level-adjusted) air pressure, hPa (0 to 1500; fitted 0.5–1.1 atm).

    References
    ----------
    Benson & Krause (1984); Standard Methods 4500-O, Table 4500-O:I; USGS OWQ Technical Memorandum 2011.03.
    """
    t = real(temp_c, "temp_c", **_TEMP_DOMAIN)
    p = real(pressure_hpa, "pressure_hpa", **_P_DOMAIN)
    if is_plain_scalar(t) and is_plain_scalar(p):
        return _factor_scalar(t, p / _ATM_HPA)
    t = np.asarray(t, dtype=float)
    x = np.reciprocal(t + 273.15)
    return _factor_array(t, x, np.asarray(p) / _ATM_HPA)


def _factor_scalar(t: float, p_atm: float) -> float:
    x = 1.0 / (t + 273.15)
    pwv = math.exp(_WV0 + x * (_WV1 + x * _WV2))
    if p_atm <= pwv:
        raise _no_air(p_atm * _ATM_HPA, t, pwv)
    th = _theta_scalar(t)
    return (p_atm - pwv) * (1.0 - th * p_atm) / ((1.0 - pwv) * (1.0 - th))


def _factor_array(t: np.ndarray, x: np.ndarray, p_atm, offset: int = 0) -> np.ndarray:
    """Pressure factor on arrays; ``x`` is 1/T (kelvin) with t's shape."""
    lp = x * _WV2
    lp += _WV1
    lp *= x
    lp += _WV0
    pwv = np.exp(lp, out=lp)
    num = p_atm - pwv
    if num.size and num.min() <= 0.0:
        i = int(np.argmin(num.ravel()))
        pi = float(np.broadcast_to(p_atm, num.shape).ravel()[i])
        ti = float(np.broadcast_to(t, num.shape).ravel()[i])
        raise _no_air(pi * _ATM_HPA, ti, float(pwv.ravel()[i]), index=offset + i)
    th = _theta_array(np.broadcast_to(t, num.shape))
    num *= 1.0 - th * p_atm
    np.subtract(1.0, th, out=th)
    pwv -= 1.0
    pwv *= -1.0  # now 1 - Pwv
    th *= pwv
    num /= th
    return num


def _no_air(p_hpa: float, t: float, pwv_atm: float, index: int | None = None) -> ValueError:
    where = "" if index is None else f"[{index}]"
    return ValueError(
        f"pressure_hpa{where} = {p_hpa:g} is not above the water-vapour pressure at {t:g} °C"
        f" ({pwv_atm * _ATM_HPA:.1f} hPa), so no air is left to dissolve; accepted: a station air"
        " pressure above that, usually 500–1100 hPa"
    )


# --- density and the Garcia & Gordon µmol/kg form -----------------------------------------------


def seawater_density_kg_m3(temp_c, salinity=0.0):
    """Density of seawater at one standard atmosphere (sea pressure 0), kg/m³, EOS-80.

    The one-atmosphere International Equation of State of Seawater, 1980 (Millero & Poisson 1981),
    with the temperature converted to IPTS-68 (t68 = 1.00024·t90) as that equation expects.

    Parameters
    ----------
    temp_c : float or array_like
        Temperature, °C (ITS-90), −5 to 90 (fitted −2 to 40).
    salinity : float or array_like
        Practical salinity (PSS-78), 0 to 70 (fitted 0 to 42).

    Returns
    -------
    float or numpy.ndarray
        Density, kg/m³ (about 998.2 for fresh water at 20 °C).

    References
    ----------
    UNESCO (1981), Tenth report of the joint panel on oceanographic tables and standards,
    UNESCO Technical Papers in Marine Science 36; Millero, F.J. and Poisson, A. (1981),
    Deep-Sea Research 28A:625–629.
    """
    t = real(temp_c, "temp_c", **_TEMP_DOMAIN)
    s = real(salinity, "salinity", **_SAL_DOMAIN)
    if is_plain_scalar(t) and is_plain_scalar(s):
        return _rho_scalar(t * _T68_PER_T90, s)
    return _rho_array(np.asarray(t) * _T68_PER_T90, np.asarray(s))


def _rho_scalar(t: float, s: float) -> float:
    rw = 999.842594 + t * (6.793952e-2 + t * (-9.095290e-3 + t * (1.001685e-4 + t * (-1.120083e-6 + t * 6.536332e-9))))
    if s == 0.0:
        return rw
    a = 0.824493 + t * (-4.0899e-3 + t * (7.6438e-5 + t * (-8.2467e-7 + t * 5.3875e-9)))
    b = -5.72466e-3 + t * (1.0227e-4 - t * 1.6546e-6)
    return rw + s * (a + math.sqrt(s) * b + 4.8314e-4 * s)


def _horner(x: np.ndarray, coeffs: tuple[float, ...]) -> np.ndarray:
    """Polynomial in x, highest power first, evaluated in place on one new array."""
    out = x * coeffs[0]
    out += coeffs[1]
    for c in coeffs[2:]:
        out *= x
        out += c
    return out


_RW = (6.536332e-9, -1.120083e-6, 1.001685e-4, -9.095290e-3, 6.793952e-2, 999.842594)
_RA = (5.3875e-9, -8.2467e-7, 7.6438e-5, -4.0899e-3, 0.824493)
_RB = (-1.6546e-6, 1.0227e-4, -5.72466e-3)


def _rho_array(t: np.ndarray, s: np.ndarray) -> np.ndarray:
    rw = _horner(t, _RW)  # pure water, EOS-80
    if np.ndim(s) == 0 and float(s) == 0.0:
        return rw
    a = _horner(t, _RA)
    b = _horner(t, _RB)
    b *= np.sqrt(s)
    a += b
    a += 4.8314e-4 * s
    a *= s
    rw += a
    return rw


def o2_solubility_umol_kg(temp_c, salinity=0.0):
    """Oxygen solubility from water-saturated air at 1 atm, µmol/kg, Garcia & Gordon (1992).

    ln C = A0 + A1·Ts + … + A5·Ts⁵ + S·(B0 + B1·Ts + B2·Ts² + B3·Ts³) + C0·S²  (G&G Eq. 8, with the
    1993 erratum), Ts = ln[(298.15 − t)/(273.15 + t)], using the fit to Benson & Krause's data
    (not the "combined fit" column). Like ``gsw.O2sol_SP_pt``, the temperature is converted to
    IPTS-68 first (t68 = 1.00024·t90), so the two agree to rounding.

    Parameters
    ----------
    temp_c : float or array_like
        Temperature, °C (ITS-90), −5 to 90 (fitted from the freezing point to 40).
    salinity : float or array_like
        Practical salinity, 0 to 70 (fitted 0 to 42).

    Returns
    -------
    float or numpy.ndarray
        Solubility, µmol/kg (284.625 at 20 °C, S = 0).

    References
    ----------
    Garcia, H.E. and Gordon, L.I. (1992), Limnol. Oceanogr. 37(6):1307–1312; erratum (1993)
    Limnol. Oceanogr. 38(3):656.
    """
    t = real(temp_c, "temp_c", **_TEMP_DOMAIN)
    s = real(salinity, "salinity", **_SAL_DOMAIN)
    if is_plain_scalar(t) and is_plain_scalar(s):
        return math.exp(_gg_ln_scalar(t * _T68_PER_T90, s))
    return np.exp(_gg_ln_array(np.asarray(t) * _T68_PER_T90, s))


def _gg_ln_scalar(t68: float, s: float) -> float:
    ts = math.log((298.15 - t68) / (273.15 + t68))
    a0, a1, a2, a3, a4, a5 = _GA
    b0, b1, b2, b3 = _GB
    ln_c = a0 + ts * (a1 + ts * (a2 + ts * (a3 + ts * (a4 + ts * a5))))
    if s != 0.0:
        ln_c += s * (b0 + ts * (b1 + ts * (b2 + ts * b3))) + _GC0 * s * s
    return ln_c


def _gg_ln_array(t68: np.ndarray, s) -> np.ndarray:
    a0, a1, a2, a3, a4, a5 = _GA
    b0, b1, b2, b3 = _GB
    ts = np.subtract(298.15, t68)
    ts /= t68 + 273.15
    np.log(ts, out=ts)
    ln_c = ts * a5
    for a in (a4, a3, a2, a1):
        ln_c += a
        ln_c *= ts
    ln_c += a0
    if np.any(s):
        st = ts * b3
        for b in (b2, b1):
            st += b
            st *= ts
        st += b0
        st += _GC0 * s
        st *= s
        ln_c += st
    return ln_c


# --- saturation ---------------------------------------------------------------------------------


def _bk_scalar(t: float, s: float) -> float:
    x = 1.0 / (t + 273.15)
    ln_c = _BK0 + x * (_BK1 + x * (_BK2 + x * (_BK3 + x * _BK4)))  # Eq. for ln C0, 4500-O:I
    if s != 0.0:
        ln_c -= s * (_BKS0 + x * (_BKS1 + x * _BKS2))  # salinity term
    return math.exp(ln_c)


def _bk_array(x: np.ndarray, s) -> np.ndarray:
    """B&K at 1 atm on arrays; ``x`` is 1/T (kelvin)."""
    ln_c = x * _BK4
    for k in (_BK3, _BK2, _BK1):
        ln_c += k
        ln_c *= x
    ln_c += _BK0
    if np.any(s):
        st = x * _BKS2
        st += _BKS1
        st *= x
        st += _BKS0
        st *= s
        ln_c -= st
    return np.exp(ln_c, out=ln_c)


def do_saturation_mg_l(temp_c, pressure_hpa=1013.25, salinity=0.0, method="benson-krause"):
    """Dissolved-oxygen concentration in equilibrium with water-saturated air, mg/L.

    ``benson-krause`` (default): Benson & Krause (1984) in the mg/L form of Standard Methods 4500-O,
    ln C0 = −139.34411 + 1.575701e5/T − 6.642308e7/T² + 1.243800e10/T³ − 8.621949e11/T⁴ with the
    salinity term −S·(1.7674e-2 − 1.0754e1/T + 2.1407e3/T²).
    ``garcia-gordon``: :func:`o2_solubility_umol_kg` × :func:`seawater_density_kg_m3` × 31.9988 mg/mol
    (the same column ``gsw.O2sol_SP_pt`` implements; gsw converts the temperature to IPTS-68, as
    this function does).
    Both are taken to station pressure with :func:`pressure_factor` (water vapour and θ).

    Parameters
    ----------
    temp_c : float or array_like
        Water temperature, °C (ITS-90). Possible: −5 to 90; fitted: 0 to 40.
    pressure_hpa : float or array_like
        Station (true, not sea-level-adjusted) barometric pressure, hPa. Possible: above the water
        vapour pressure and at most 1500; fitted: 0.5–1.1 atm (507–1115 hPa). Default 1 atm.
    salinity : float or array_like
        Practical salinity (PSS-78). Possible: 0 to 70; fitted: 0 to 40. Default 0 (fresh water).
    method : {"benson-krause", "garcia-gordon"}
        Which solubility equation to use.

    Returns
    -------
    float or numpy.ndarray
        Saturation concentration, mg/L (9.092 at 20 °C, 1 atm, S = 0 by Benson & Krause).
        Arrays broadcast; Python floats in give a float out.

    Raises
    ------
    ValueError
        NaN, infinite or impossible input (named in the message), or an unknown method.
        Values outside the fitted ranges are computed: see :func:`saturation_range_flags`.

    References
    ----------
    Benson, B.B. and Krause, D. (1984), Limnol. Oceanogr. 29(3):620–632; Standard Methods for the
    Examination of Water and Wastewater, 4500-O, Table 4500-O:I; USGS OWQ Technical Memorandum
    2011.03; Garcia, H.E. and Gordon, L.I. (1992), Limnol. Oceanogr. 37(6):1307–1312.
    """
    if method != "benson-krause":
        method = choice(method, "method", METHODS)
    t = real(temp_c, "temp_c", **_TEMP_DOMAIN)
    p = real(pressure_hpa, "pressure_hpa", **_P_DOMAIN)
    s = real(salinity, "salinity", **_SAL_DOMAIN)
    if is_plain_scalar(t) and is_plain_scalar(p) and is_plain_scalar(s):
        if method == "benson-krause":
            c = _bk_scalar(t, s)
        else:
            c = (
                math.exp(_gg_ln_scalar(t * _T68_PER_T90, s))
                * _rho_scalar(t * _T68_PER_T90, s)
                * (_MG_PER_UMOL_O2 / 1000.0)
            )
        if p == _ATM_HPA:
            return c
        return c * _factor_scalar(t, p / _ATM_HPA)

    shape = np.broadcast_shapes(np.shape(t), np.shape(p), np.shape(s))
    size = math.prod(shape)
    if size > _CHUNK and all(np.ndim(a) == 0 or np.shape(a) == shape for a in (t, p, s)):
        # Large arrays: work through cache-sized blocks so the temporaries never leave the CPU cache.
        out = np.empty(shape)
        flat = out.reshape(-1)
        tf, pf, sf = (a if np.ndim(a) == 0 else np.ravel(a) for a in (t, p, s))
        for i in range(0, size, _CHUNK):
            j = min(i + _CHUNK, size)
            tb, pb, sb = (a if np.ndim(a) == 0 else a[i:j] for a in (tf, pf, sf))
            flat[i:j] = _sat_block(tb, pb, sb, method, i)
        return out
    return _sat_block(t, p, s, method, 0)


_CHUNK = 32768  # elements per block in the vectorised path (8 temporaries of 256 kB fit in L2/L3)


def _sat_block(t, p, s, method: str, offset: int) -> np.ndarray:
    """The vectorised saturation on one block (arrays already validated; scalars broadcast)."""
    shape = np.broadcast_shapes(np.shape(t), np.shape(p), np.shape(s))
    t = np.broadcast_to(t, shape)
    x = t + 273.15
    np.reciprocal(x, out=x)  # 1/T
    if method == "benson-krause":
        c = _bk_array(x, s)
    else:
        t68 = t * _T68_PER_T90
        c = _gg_ln_array(t68, s)
        np.exp(c, out=c)
        c *= _rho_array(t68, np.asarray(s))
        c *= _MG_PER_UMOL_O2 / 1000.0
    if np.ndim(p) == 0 and float(p) == _ATM_HPA:
        return c
    c *= _factor_array(t, x, np.asarray(p) / _ATM_HPA, offset)
    return c


def percent_saturation(do_mg_l, do_sat_mg_l):
    """Percent saturation of a DO reading, 100 · DO / Cp.

    Parameters
    ----------
    do_mg_l : float or array_like
        Measured dissolved oxygen, mg/L (0 to 70; pure oxygen at 0 °C and 1 atm holds about 70).
    do_sat_mg_l : float or array_like
        Saturation concentration at the same temperature, pressure and salinity, mg/L (> 0),
        from :func:`do_saturation_mg_l`.

    Returns
    -------
    float or numpy.ndarray
        Percent saturation, %.

    References
    ----------
    USGS National Field Manual, chapter A6.2 (2013).
    """
    d = real(do_mg_l, "do_mg_l", lo=0.0, hi=70.0, unit="mg/L")
    c = real(do_sat_mg_l, "do_sat_mg_l", lo=0.0, hi=100.0, lo_open=True, unit="mg/L")
    return 100.0 * d / c


def do_mg_l_from_percent(percent, do_sat_mg_l):
    """DO concentration from a reading in percent saturation, mg/L: percent/100 · Cp.

    Parameters
    ----------
    percent : float or array_like
        Reading in % saturation (0 to 500; pure oxygen is about 478 %).
    do_sat_mg_l : float or array_like
        Saturation concentration, mg/L (> 0), from :func:`do_saturation_mg_l`.
    """
    q = real(percent, "do_percent", lo=0.0, hi=500.0, unit="%")
    c = real(do_sat_mg_l, "do_sat_mg_l", lo=0.0, hi=100.0, lo_open=True, unit="mg/L")
    return q * c / 100.0


#: What a meter's % saturation is a percentage of: saturation at the local (station) pressure, or at
#: 760 mmHg whatever the pressure. Meters differ; at 2000 m (about 795 hPa) the two differ by about 22 %
#: (US Standard Atmosphere 1976 for the pressure; the meter conventions [common practice]). "local" is the default.
PERCENT_BASES = ("local", "sea-level")


def meter_percent_to_mg_l(percent, temp_c, pressure_hpa, salinity=0.0, basis="local", method="benson-krause"):
    """DO in mg/L from a meter's % saturation reading, on the meter's own % basis.

    mg/L = % / 100 × Cp, with Cp the saturation at the water temperature and salinity and at the
    station pressure (``basis="local"``) or at 1013.25 hPa = 760 mmHg (``basis="sea-level"``).

    Parameters
    ----------
    percent : float or array_like
        The meter's reading, % (0 to 500).
    temp_c : float or array_like
        Water temperature, °C.
    pressure_hpa : float or array_like
        Station pressure, hPa (used only with ``basis="local"``).
    salinity : float or array_like
        Practical salinity.
    basis : {"local", "sea-level"}
        What the meter's 100 % means.
    method : str
        Saturation equation (:func:`do_saturation_mg_l`).

    Returns
    -------
    float or numpy.ndarray
        DO, mg/L.

    References
    ----------
    USGS National Field Manual, chapter A6.2 (2013) for % saturation against the local pressure; the
    760 mmHg basis some meters use is from the trade [common practice].
    """
    b = choice(basis, "basis", PERCENT_BASES)
    p = pressure_hpa if b == "local" else 1013.25
    return do_mg_l_from_percent(percent, do_saturation_mg_l(temp_c, p, salinity, method))


def saturation_range_flags(temp_c, pressure_hpa, salinity) -> list[Flag]:
    """Flags inputs outside the ranges the solubility equations were fitted to.

    Parameters
    ----------
    temp_c : float or array_like
        °C; fitted 0–40.
    pressure_hpa : float or array_like
        hPa; fitted 0.5–1.1 atm (506.6–1114.6 hPa).
    salinity : float or array_like
        Practical salinity; fitted 0–40.

    Returns
    -------
    list of Flag
        Codes ``saturation.temp_out_of_range``, ``saturation.pressure_out_of_range``,
        ``saturation.salinity_out_of_range`` (warnings); empty when all are inside.
    """
    t = real(temp_c, "temp_c", **_TEMP_DOMAIN)
    p = real(pressure_hpa, "pressure_hpa", **_P_DOMAIN)
    s = real(salinity, "salinity", **_SAL_DOMAIN)
    flags: list[Flag] = []
    lo, hi = VALID_TEMP_C
    if np.any((np.asarray(t) < lo) | (np.asarray(t) > hi)):
        flags.append(
            Flag(
                "saturation.temp_out_of_range",
                Severity.WARNING,
                f"Water temperature {_show(t)} °C is outside 0–40 °C, the range the saturation equation was"
                " fitted to; the target is an extrapolation.",
                "Check the temperature and its unit; report the saturation as estimated.",
                "temp_c",
            )
        )
    plo, phi = VALID_PRESSURE_ATM[0] * _ATM_HPA, VALID_PRESSURE_ATM[1] * _ATM_HPA
    if np.any((np.asarray(p) < plo) | (np.asarray(p) > phi)):
        flags.append(
            Flag(
                "saturation.pressure_out_of_range",
                Severity.WARNING,
                f"Pressure {_show(p)} hPa is outside 0.5–1.1 atm ({plo:.0f}–{phi:.0f} hPa), the range the"
                " pressure correction was fitted to.",
                "Check the pressure's unit (hPa, mmHg, inHg) and that it is station pressure.",
                "pressure_hpa",
            )
        )
    slo, shi = VALID_SALINITY
    if np.any((np.asarray(s) < slo) | (np.asarray(s) > shi)):
        flags.append(
            Flag(
                "saturation.salinity_out_of_range",
                Severity.WARNING,
                f"Salinity {_show(s)} is outside 0–40, the range the salinity term was fitted to.",
                "Check the salinity or conductivity entered (and its unit).",
                "salinity",
            )
        )
    return flags


def _show(v) -> str:
    if is_plain_scalar(v):
        return f"{v:g}"
    a = np.asarray(v)
    return f"{a.min():g} to {a.max():g}"
