"""Air pressure: units, parsing, the standard atmosphere, and a check for sea-level-adjusted readings."""

from __future__ import annotations

import numpy as np

from core.flags import Flag, Severity
from core.science._validate import is_plain_scalar, real

__all__ = [
    "PRESSURE_UNITS",
    "HPA_PER_UNIT",
    "STANDARD_ATMOSPHERE_HPA",
    "SEA_LEVEL_ADJUSTED_THRESHOLD_HPA",
    "to_hpa",
    "from_hpa",
    "standard_pressure_hpa",
    "sea_level_to_station_hpa",
    "station_to_sea_level_hpa",
    "sea_level_adjusted_flag",
    "FAR_BELOW_THRESHOLD_HPA",
    "far_below_standard_flag",
    "station_pressure_flags",
    "flat_pressure_flag",
    "FLAT_MIN_SPREAD_M",
    "FLAT_FRACTION",
]

#: Units accepted in text and by :func:`to_hpa` / :func:`from_hpa` (canonical spelling).
PRESSURE_UNITS: tuple[str, ...] = ("hPa", "mbar", "kPa", "Pa", "mmHg", "torr", "inHg", "atm", "psi")

STANDARD_ATMOSPHERE_HPA = 1013.25  # 1 atm = 101325 Pa exactly (definition)
_MMHG_HPA = 1.33322387415  # conventional millimetre of mercury, 133.322387415 Pa (NIST SP 811)

#: Size of one unit in hPa. 1 torr = 101325/760 Pa exactly; 1 inHg = 25.4 mmHg;
#: 1 psi = 6894.757293168 Pa (NIST SP 811, Appendix B).
HPA_PER_UNIT: dict[str, float] = {
    "hPa": 1.0,
    "mbar": 1.0,
    "kPa": 10.0,
    "Pa": 0.01,
    "mmHg": _MMHG_HPA,
    "torr": STANDARD_ATMOSPHERE_HPA / 760.0,
    "inHg": 25.4 * _MMHG_HPA,
    "atm": STANDARD_ATMOSPHERE_HPA,
    "psi": 68.94757293168,
}

#: A station reading more than this far above the standard atmosphere at the site's elevation looks
#: sea-level adjusted. Weather moves station pressure roughly ±30 hPa about the standard value
#: (a strong high at sea level is about 1040 hPa); 40 hPa clears that, fires on a sea-level value
#: at sites above about 335 m, and is about 4 % of the saturation target. [common practice; our choice]
SEA_LEVEL_ADJUSTED_THRESHOLD_HPA = 40.0

#: A station reading more than this far below the standard atmosphere at the site's elevation is
#: lower than anything but a strong tropical cyclone brings (about 930 hPa at sea level): usually a
#: wrong unit (mmHg typed as hPa) or a wrong site elevation. [common practice; our choice]
FAR_BELOW_THRESHOLD_HPA = 80.0

# US Standard Atmosphere 1976, troposphere: P = P0 (1 - L h / T0)^(g M / (R L)).
_USSA_K = 2.25577e-5  # L/T0 = 0.0065 K/m / 288.15 K, per metre
_USSA_EXP = 5.25588  # g0 M / (R* L)
ELEVATION_RANGE_M = (-500.0, 11000.0)  # the troposphere layer of the 1976 standard (and the Dead Sea shore)

_UNITS_TEXT = ", ".join(PRESSURE_UNITS)


def _unit(unit: str, name: str = "unit") -> str:
    from core.science.quantities import canonical_unit

    u = canonical_unit("pressure", unit)
    if u is None:
        raise ValueError(f"{name} = {unit!r} is not a pressure unit; accepted: {_UNITS_TEXT}")
    return u


def to_hpa(value, unit: str):
    """Converts a pressure in ``unit`` to hPa.

    Parameters
    ----------
    value : float or array_like
        Absolute pressure (>= 0) in ``unit``.
    unit : str
        One of :data:`PRESSURE_UNITS` (case-insensitive).

    Returns
    -------
    float or numpy.ndarray
        Pressure in hPa.
    """
    u = _unit(unit)
    v = real(value, "pressure", lo=0.0, unit=u, note=" (an absolute pressure is never negative)")
    return v * HPA_PER_UNIT[u]


def from_hpa(value_hpa, unit: str):
    """Converts a pressure in hPa to ``unit`` (one of :data:`PRESSURE_UNITS`); the inverse of :func:`to_hpa`."""
    u = _unit(unit)
    v = real(value_hpa, "pressure_hpa", lo=0.0, unit="hPa", note=" (an absolute pressure is never negative)")
    return v / HPA_PER_UNIT[u]


def _elevation(elevation_m):
    return real(
        elevation_m,
        "elevation_m",
        lo=ELEVATION_RANGE_M[0],
        hi=ELEVATION_RANGE_M[1],
        unit="m",
        note=" (the troposphere of the US Standard Atmosphere 1976)",
    )


def standard_pressure_hpa(elevation_m):
    """Pressure of the US Standard Atmosphere 1976 at an elevation.

    P = 1013.25 hPa · (1 − 2.25577e-5 · h)^5.25588 (troposphere layer, h in metres above mean sea level).

    Parameters
    ----------
    elevation_m : float or array_like
        Elevation above mean sea level, m, −500 to 11 000.

    Returns
    -------
    float or numpy.ndarray
        Standard-atmosphere pressure, hPa (1000 m → 898.746 hPa).

    References
    ----------
    NOAA/NASA/USAF (1976), U.S. Standard Atmosphere, 1976, NOAA-S/T 76-1562.
    """
    h = _elevation(elevation_m)
    if is_plain_scalar(h):
        return STANDARD_ATMOSPHERE_HPA * (1.0 - _USSA_K * h) ** _USSA_EXP
    return STANDARD_ATMOSPHERE_HPA * np.power(1.0 - _USSA_K * h, _USSA_EXP)


def _ratio(h):
    # P(h) / P(0) of the standard atmosphere
    if is_plain_scalar(h):
        return (1.0 - _USSA_K * h) ** _USSA_EXP
    return np.power(1.0 - _USSA_K * h, _USSA_EXP)


def sea_level_to_station_hpa(p_sea_level_hpa, elevation_m):
    """Station pressure from a sea-level-adjusted value, by the standard-atmosphere ratio.

    p_station = p_sea_level · P_std(h) / P_std(0). Weather services reduce with the observed air
    temperature, so a published sea-level value converted back this way can differ from the true
    station pressure by a few hPa: prefer a barometer reading at the site.

    Parameters
    ----------
    p_sea_level_hpa : float or array_like
        Sea-level-adjusted pressure, hPa (> 0).
    elevation_m : float or array_like
        Site elevation, m, −500 to 11 000.

    Returns
    -------
    float or numpy.ndarray
        Estimated station pressure, hPa.
    """
    p = real(p_sea_level_hpa, "p_sea_level_hpa", lo=0.0, lo_open=True, unit="hPa")
    return p * _ratio(_elevation(elevation_m))


def station_to_sea_level_hpa(p_station_hpa, elevation_m):
    """Sea-level-adjusted pressure from station pressure (the inverse of :func:`sea_level_to_station_hpa`)."""
    p = real(p_station_hpa, "p_station_hpa", lo=0.0, lo_open=True, unit="hPa")
    return p / _ratio(_elevation(elevation_m))


def _against_standard(pressure_hpa: float, elevation_m: float, threshold_hpa: float) -> tuple[float, float, float]:
    """Checked (pressure_hpa, threshold_hpa, standard atmosphere at elevation_m), all hPa, for the flag checks."""
    p = real(pressure_hpa, "pressure_hpa", lo=0.0, lo_open=True, unit="hPa")
    thr = real(threshold_hpa, "threshold_hpa", lo=0.0, unit="hPa")
    expected = standard_pressure_hpa(elevation_m)
    if not is_plain_scalar(p - expected):
        raise ValueError("pressure_hpa and elevation_m must be single numbers for this check")
    return p, thr, expected


def sea_level_adjusted_flag(
    pressure_hpa: float, elevation_m: float, threshold_hpa: float = SEA_LEVEL_ADJUSTED_THRESHOLD_HPA
) -> Flag | None:
    """Flags a station-pressure reading that looks like a sea-level-adjusted (weather-report) value.

    Parameters
    ----------
    pressure_hpa : float
        The pressure entered as station pressure, hPa (> 0).
    elevation_m : float
        Site elevation, m, −500 to 11 000.
    threshold_hpa : float
        How far above the standard atmosphere at ``elevation_m`` a reading may be before it is
        flagged; default :data:`SEA_LEVEL_ADJUSTED_THRESHOLD_HPA` (40 hPa, common practice).

    Returns
    -------
    Flag or None
        ``pressure.sea_level_adjusted`` (warning) when ``pressure_hpa`` exceeds the standard
        atmosphere at the site by more than ``threshold_hpa``; else None.
    """
    p, thr, expected = _against_standard(pressure_hpa, elevation_m, threshold_hpa)
    excess = p - expected
    if excess <= thr:
        return None
    station = sea_level_to_station_hpa(p, elevation_m)
    return Flag(
        code="pressure.sea_level_adjusted",
        severity=Severity.WARNING,
        message=(
            f"Pressure {p:.1f} hPa is {excess:.0f} hPa above the standard atmosphere at"
            f" {float(elevation_m):.0f} m ({expected:.1f} hPa); it looks like a sea-level-adjusted"
            " weather-service value, which would overstate the saturation target."
        ),
        action=(
            f"Read the barometer at the site (station pressure); if this is a sea-level value,"
            f" the station pressure is about {station:.1f} hPa."
        ),
        field="pressure_hpa",
    )


def far_below_standard_flag(
    pressure_hpa: float, elevation_m: float, threshold_hpa: float = FAR_BELOW_THRESHOLD_HPA
) -> Flag | None:
    """Flags a station reading far below the standard atmosphere at the site (a wrong unit or elevation).

    Parameters
    ----------
    pressure_hpa : float
        Station pressure as entered, hPa (> 0).
    elevation_m : float
        Site elevation, m, −500 to 11 000.
    threshold_hpa : float
        How far below the standard atmosphere a reading may be; default
        :data:`FAR_BELOW_THRESHOLD_HPA` (80 hPa, common practice).

    Returns
    -------
    Flag or None
        ``pressure.far_below_standard`` (warning), else None.
    """
    p, thr, expected = _against_standard(pressure_hpa, elevation_m, threshold_hpa)
    deficit = expected - p
    if deficit <= thr:
        return None
    as_mmhg = p * HPA_PER_UNIT["mmHg"]
    return Flag(
        code="pressure.far_below_standard",
        severity=Severity.WARNING,
        message=(
            f"Pressure {p:.1f} hPa is {deficit:.0f} hPa below the standard atmosphere at"
            f" {float(elevation_m):.0f} m ({expected:.1f} hPa), lower than weather brings there."
        ),
        action=(
            f"Check the unit (if the barometer reads mmHg, {p:g} mmHg is {as_mmhg:.1f} hPa) and the site's elevation."
        ),
        field="pressure_hpa",
    )


def station_pressure_flags(pressure_hpa: float, elevation_m: float) -> list[Flag]:
    """Both plausibility checks of a station pressure against the site elevation.

    Returns the flags of :func:`sea_level_adjusted_flag` and :func:`far_below_standard_flag`
    (at most one of them fires).
    """
    flags = [sea_level_adjusted_flag(pressure_hpa, elevation_m), far_below_standard_flag(pressure_hpa, elevation_m)]
    return [f for f in flags if f is not None]


#: Stops whose elevations differ by more than this are checked for a flat pressure series: 150 m is about
#: 18 hPa of standard-atmosphere difference, well above what weather changes in a day's route.
#: [common practice; our choice]
FLAT_MIN_SPREAD_M = 150.0
#: A series is "flat" when the pressure difference between the lowest and the highest stop is less than
#: this fraction of the standard atmosphere's difference between them. [common practice; our choice]
FLAT_FRACTION = 0.5


def flat_pressure_flag(readings) -> Flag | None:
    """Flags station pressures that stay flat across stops at very different elevations (sea-level adjusted).

    Near sea level the standard atmosphere falls about 0.12 hPa per metre (1 hPa ≈ 8.3 m), so stops
    more than :data:`FLAT_MIN_SPREAD_M` apart in elevation should differ by tens of hPa. Readings that
    stay flat across such a spread look sea-level adjusted, even at low sites where the single-reading
    check (:func:`sea_level_adjusted_flag`) cannot tell adjustment from weather.

    Parameters
    ----------
    readings : iterable of (str, float, float)
        (where, elevation_m, pressure_hpa) per stop: a label a person recognises, the site elevation
        (m, −500 to 11 000) and the station pressure (hPa, > 0).

    Returns
    -------
    Flag or None
        ``pressure.flat_across_elevations`` (warning) when the lowest and the highest stop differ by more
        than :data:`FLAT_MIN_SPREAD_M` in elevation and their pressures differ by less than
        :data:`FLAT_FRACTION` of the standard atmosphere's difference; else None.

    References
    ----------
    US Standard Atmosphere 1976 (troposphere); the 0.12 hPa per metre rule of thumb follows from it
    (the barometric formula's slope near sea level).
    """
    rows = []
    for where, h, p in readings:
        rows.append(
            (str(where), float(_elevation(h)), float(real(p, "pressure_hpa", lo=0.0, lo_open=True, unit="hPa")))
        )
    if len(rows) < 2:
        return None
    low = min(rows, key=lambda r: r[1])
    high = max(rows, key=lambda r: r[1])
    spread = high[1] - low[1]
    if spread <= FLAT_MIN_SPREAD_M:
        return None
    expected = float(standard_pressure_hpa(low[1]) - standard_pressure_hpa(high[1]))
    observed = low[2] - high[2]
    if observed >= FLAT_FRACTION * expected:
        return None
    gap = (
        f"the higher stop read {-observed:.1f} hPa more"
        if observed < 0
        else f"only {observed:.1f} hPa apart"
        if observed > 0
        else "the same pressure"
    )
    return Flag(
        code="pressure.flat_across_elevations",
        severity=Severity.WARNING,
        message=(
            f"{low[0]} at {low[1]:.0f} m read {low[2]:.1f} hPa and {high[0]} at {high[1]:.0f} m read"
            f" {high[2]:.1f} hPa: {gap}, where the standard atmosphere falls about {expected:.0f} hPa over"
            f" those {spread:.0f} m (about 0.12 hPa per metre). Readings that stay flat, or rise, as the"
            " route climbs look sea-level adjusted."
        ),
        action=(
            "Check where the pressures came from: use the barometer's station (absolute) reading, not a"
            " weather report or an altimeter-corrected value."
        ),
        field="pressure_hpa",
    )
