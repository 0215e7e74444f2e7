"""Conductivity: units, specific conductance at 25 °C, and practical salinity (PSS-78 with Hill et al. 1986)."""

from __future__ import annotations

import csv
import functools
import io
from importlib import resources
from typing import Any

import numpy as np

from core.science._validate import choice, is_plain_scalar, real

__all__ = [
    "CONDUCTIVITY_UNITS",
    "US_CM_PER_UNIT",
    "COMPENSATION_METHODS",
    "KCL_ALPHA_PER_C",
    "C3515_MS_CM",
    "ALPHA_RANGE_PER_C",
    "specific_conductance_us_cm",
    "conductivity_at_temp_us_cm",
    "practical_salinity",
    "salinity_from_specific_conductance",
    "iso7888_f25",
]

#: Units accepted in text (canonical spelling); "uS/cm" and "µS/cm" are the same unit.
CONDUCTIVITY_UNITS: tuple[str, ...] = ("uS/cm", "µS/cm", "mS/cm", "mS/m", "S/m")
US_CM_PER_UNIT: dict[str, float] = {"uS/cm": 1.0, "µS/cm": 1.0, "mS/cm": 1000.0, "mS/m": 10.0, "S/m": 10000.0}

COMPENSATION_METHODS = ("linear", "iso7888")
#: Linear temperature coefficient for KCl solutions, 1/°C (Standard Methods 2510 B) [from memory];
#: natural waters span 0.0175–0.0198, mean 0.0187 (Hayashi 2004, Environ. Monit. Assess. 96:119–128).
KCL_ALPHA_PER_C = 0.0191
#: Conductivity of standard seawater (S = 35, 15 °C IPTS-68, 0 dbar), mS/cm (as in TEOS-10's GSW-C).
C3515_MS_CM = 42.9140

_COND_DOMAIN: dict[str, Any] = dict(lo=0.0, hi=300000.0, unit="µS/cm", note=" (saturated brine is about 250 000 µS/cm)")
_TEMP_DOMAIN: dict[str, Any] = dict(lo=-5.0, hi=90.0, unit="°C", note=" (liquid water)")
_ISO_RANGE_C = (0.0, 36.0)  # the ISO 7888 table runs 0.0–35.9 °C

# PSS-78 coefficients (UNESCO 1983, Technical Papers in Marine Science 44; as in GSW-C).
_A = (0.0080, -0.1692, 25.3851, 14.0941, -7.0261, 2.7081)
_B = (0.0005, -0.0056, -0.0066, -0.0375, 0.0636, -0.0144)
_K = 0.0162
_C = (0.6766097, 2.00564e-2, 1.104259e-4, -6.9698e-7, 1.0031e-9)
_D = (3.426e-2, 4.464e-4, 4.215e-1, -3.107e-3)
_E = (2.070e-5, -6.370e-10, 3.989e-15)
_T68_PER_T90 = 1.00024


@functools.cache
def _f25_table() -> tuple[np.ndarray, np.ndarray]:
    raw = resources.files("core.science").joinpath("data/iso7888_f25.csv").read_text(encoding="utf-8")
    rows = list(csv.DictReader(io.StringIO(raw)))
    t = np.array([float(r["temp_c"]) for r in rows])
    f = np.array([float(r["f25"]) for r in rows])
    return t, f


def iso7888_f25(temp_c):
    """Temperature-correction factor f25(t) of ISO 7888 / EN 27888 for natural waters, κ25 = f25·κt.

    The table's values at 0, 5, …, 35 °C (core/science/data/iso7888_f25.csv) are joined by a cubic Hermite
    curve through ln f25 with centred-difference slopes; the last segment is continued to 35.9 °C.
    Between the nodes the value is an interpolation, not the standard's own 0.1 °C entry.

    Parameters
    ----------
    temp_c : float or array_like
        Water temperature, °C, 0 to 35.9 (the table's range).

    Returns
    -------
    float or numpy.ndarray
        f25, dimensionless (1 at 25 °C).

    References
    ----------
    ISO 7888:1985, Water quality — Determination of electrical conductivity, Table 1 (values above
    12 °C from memory).
    """
    t = real(
        temp_c,
        "temp_c",
        lo=_ISO_RANGE_C[0],
        hi=_ISO_RANGE_C[1],
        hi_open=True,
        unit="°C",
        note=" (the ISO 7888 table's range; use method='linear' outside it)",
    )
    nodes, f = _f25_table()
    y = np.log(f)
    h = np.diff(nodes)
    slope = np.empty_like(y)
    slope[1:-1] = (y[2:] - y[:-2]) / (nodes[2:] - nodes[:-2])
    slope[0] = (y[1] - y[0]) / h[0]
    slope[-1] = (y[-1] - y[-2]) / h[-1]
    ta = np.asarray(t, dtype=float)
    i = np.clip(np.searchsorted(nodes, ta, side="right") - 1, 0, len(nodes) - 2)
    hi_ = h[i]
    u = (ta - nodes[i]) / hi_
    h00 = (1 + 2 * u) * (1 - u) ** 2
    h10 = u * (1 - u) ** 2
    h01 = u * u * (3 - 2 * u)
    h11 = u * u * (u - 1)
    out = np.exp(h00 * y[i] + h10 * hi_ * slope[i] + h01 * y[i + 1] + h11 * hi_ * slope[i + 1])
    return float(out) if is_plain_scalar(t) else out


#: Accepted linear coefficients, 1/°C: natural waters span 0.0175–0.0198 (Hayashi 2004); beyond this range a
#: coefficient is a typing mistake, and within it 1 + α(t − 25) stays above 0.1 for every accepted
#: temperature (−5 °C and above), so the denominator is never zero or negative. [common practice]
ALPHA_RANGE_PER_C = (0.015, 0.030)


def _alpha(alpha):
    lo, hi = ALPHA_RANGE_PER_C
    return real(alpha, "alpha", lo=lo, hi=hi, unit="1/°C", note=" (natural waters 0.0175–0.0198, KCl 0.0191)")


def specific_conductance_us_cm(conductivity_us_cm, temp_c, method="linear", alpha=KCL_ALPHA_PER_C):
    """Specific conductance (conductivity referred to 25 °C) from conductivity at the water temperature.

    ``linear``: κ25 = κt / [1 + α(t − 25)] (Standard Methods 2510 B), α an option.
    ``iso7888``: κ25 = f25(t)·κt with the ISO 7888 natural-water table (:func:`iso7888_f25`).

    Parameters
    ----------
    conductivity_us_cm : float or array_like
        Conductivity at ``temp_c`` (not compensated), µS/cm, 0 to 300 000.
    temp_c : float or array_like
        Water temperature, °C; linear −5 to 90, iso7888 0 to 35.9.
    method : {"linear", "iso7888"}
        Compensation.
    alpha : float
        Linear temperature coefficient, 1/°C, 0.015 to 0.030 (:data:`ALPHA_RANGE_PER_C`); default 0.0191 (KCl).

    Returns
    -------
    float or numpy.ndarray
        Specific conductance, µS/cm at 25 °C.
    """
    if method != "linear":
        method = choice(method, "method", COMPENSATION_METHODS)
    k = real(conductivity_us_cm, "conductivity_us_cm", **_COND_DOMAIN)
    if method == "iso7888":
        return k * iso7888_f25(temp_c)
    t = real(temp_c, "temp_c", **_TEMP_DOMAIN)
    a = _alpha(alpha)
    denominator = 1.0 + a * (t - 25.0)  # ≥ 1 − 0.030 × 30 = 0.1 for the accepted α and t
    return k / denominator


def conductivity_at_temp_us_cm(sc25_us_cm, temp_c, method="linear", alpha=KCL_ALPHA_PER_C):
    """Conductivity at ``temp_c`` from specific conductance: the inverse of :func:`specific_conductance_us_cm`.

    Parameters
    ----------
    sc25_us_cm : float or array_like
        Specific conductance at 25 °C, µS/cm, 0 to 300 000.
    temp_c, method, alpha
        As in :func:`specific_conductance_us_cm`.

    Returns
    -------
    float or numpy.ndarray
        Conductivity at ``temp_c``, µS/cm.
    """
    if method != "linear":
        method = choice(method, "method", COMPENSATION_METHODS)
    k = real(sc25_us_cm, "sc25_us_cm", **_COND_DOMAIN)
    if method == "iso7888":
        return k / iso7888_f25(temp_c)
    t = real(temp_c, "temp_c", **_TEMP_DOMAIN)
    a = _alpha(alpha)
    return k * (1.0 + a * (t - 25.0))


def _poly(c, x):
    out = np.zeros_like(x) + c[-1]
    for ci in c[-2::-1]:
        out = out * x + ci
    return out


def _sp_raw(rtx, ft68):
    # PSS-78 Eq. (1): S = Σ a_i Rt^(i/2) + Δt/(1 + k Δt) · Σ b_i Rt^(i/2)
    return _poly(_A, rtx) + ft68 * _poly(_B, rtx)


def _dsp_drtx(rtx, ft68):
    da = [i * a for i, a in enumerate(_A)][1:]
    db = [i * b for i, b in enumerate(_B)][1:]
    return _poly(da, rtx) + ft68 * _poly(db, rtx)


def _hill_terms(rtx, ft68):
    # Hill, Dauphinee & Woods (1986): S = S_PSS − a0/(1 + 1.5X + X²) − b0 f(t)/(1 + Y^½ + Y + Y^3/2),
    # X = 400 Rt, Y = 100 Rt.
    x = 400.0 * rtx * rtx
    sqrty = 10.0 * rtx
    return _A[0] / (1.0 + x * (1.5 + x)) + ft68 * _B[0] / (1.0 + sqrty * (1.0 + sqrty * (1.0 + sqrty)))


def _hill_ratio_at_sp2(ft68):
    """2 / S_Hill_raw at the Rt where PSS-78 gives S = 2: scales Hill's extension to meet PSS-78 at 2."""
    rtx = np.full_like(ft68, np.sqrt(2.0 / 35.0))
    for _ in range(6):  # Newton on the PSS-78 polynomial; converges to machine precision in ~4 steps
        rtx = rtx - (_sp_raw(rtx, ft68) - 2.0) / _dsp_drtx(rtx, ft68)
    return 2.0 / (2.0 - _hill_terms(rtx, ft68))


def practical_salinity(conductivity_ms_cm, temp_c, pressure_dbar=0.0):
    """Practical salinity (PSS-78) from conductivity, with the Hill et al. (1986) extension below S = 2.

    R = C / 42.914 mS/cm; Rt = R / (Rp · rt); Rp from Eq. (3) (pressure), rt from Eq. (4)
    (temperature, IPTS-68 with t68 = 1.00024·t90); S from Eq. (1). Below S = 2 the Hill, Dauphinee &
    Woods (1986) form is used, scaled so that it equals PSS-78 at S = 2 (as TEOS-10's gsw does), so the
    result is continuous there and reaches 0 at zero conductivity.

    Parameters
    ----------
    conductivity_ms_cm : float or array_like
        In-situ conductivity, mS/cm (0 to 300; fitted 2–42 salinity). Fresh streams: 0.05–2 mS/cm.
    temp_c : float or array_like
        In-situ temperature, °C (ITS-90), −5 to 90 (fitted −2 to 35).
    pressure_dbar : float or array_like
        Sea pressure, dbar (0 at the surface), 0 to 11 000.

    Returns
    -------
    float or numpy.ndarray
        Practical salinity, dimensionless. Below about 2–3 µS/cm (nearly pure water) the formula gives
        values a little under zero (down to about −0.0003); they are returned as computed, not
        clamped (gsw returns NaN there). :func:`core.science.assess.assess_reading` flags that case.

    References
    ----------
    UNESCO (1981), Technical Papers in Marine Science 36; UNESCO (1983), Technical Papers in Marine
    Science 44; Lewis, E.L. and Perkin, R.G. (1981), Deep-Sea Research 28A:307–328; Hill, K.D.,
    Dauphinee, T.M. and Woods, D.J. (1986), IEEE J. Oceanic Eng. OE-11(1):109–112.
    """
    c = real(
        conductivity_ms_cm,
        "conductivity_ms_cm",
        lo=0.0,
        hi=300.0,
        unit="mS/cm",
        note=" (saturated brine is about 250 mS/cm)",
    )
    t = real(temp_c, "temp_c", **_TEMP_DOMAIN)
    p = real(pressure_dbar, "pressure_dbar", lo=0.0, hi=11000.0, unit="dbar", note=" (sea pressure)")
    scalar = is_plain_scalar(c) and is_plain_scalar(t) and is_plain_scalar(p)
    c, t, p = np.broadcast_arrays(np.asarray(c, float), np.asarray(t, float), np.asarray(p, float))
    t68 = t * _T68_PER_T90
    ft68 = (t68 - 15.0) / (1.0 + _K * (t68 - 15.0))
    r = c / C3515_MS_CM
    rt_lc = _poly(_C, t68)  # Eq. (4)
    rp = 1.0 + p * (_E[0] + p * (_E[1] + p * _E[2])) / (
        1.0 + _D[0] * t68 + _D[1] * t68 * t68 + (_D[2] + _D[3] * t68) * r
    )  # Eq. (3)
    rt = r / (rp * rt_lc)
    rtx = np.sqrt(rt)
    sp = _sp_raw(rtx, ft68)
    low = sp < 2.0
    if np.any(low):
        sp = np.where(low, _hill_ratio_at_sp2(ft68) * (sp - _hill_terms(rtx, ft68)), sp)
    return float(sp) if scalar else sp


def salinity_from_specific_conductance(sc25_us_cm):
    """Practical salinity from specific conductance (conductivity at 25 °C), µS/cm, at 0 dbar.

    Equivalent to :func:`practical_salinity` with C = sc25/1000 mS/cm and t = 25 °C.

    Parameters
    ----------
    sc25_us_cm : float or array_like
        Specific conductance, µS/cm at 25 °C, 0 to 300 000.

    Returns
    -------
    float or numpy.ndarray
        Practical salinity (about 0.2 for 410 µS/cm).
    """
    k = real(sc25_us_cm, "sc25_us_cm", **_COND_DOMAIN)
    return practical_salinity(k / 1000.0, 25.0)
