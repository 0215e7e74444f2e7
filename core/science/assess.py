"""One streamside reading assessed: saturation target, % saturation, salinity from conductivity, and all flags."""

from __future__ import annotations

from dataclasses import dataclass, field

import core
from core.flags import Flag, Severity
from core.science import conductivity as cond
from core.science import oxygen
from core.science._validate import choice, real
from core.science.criteria import Criteria, do_criteria_flags
from core.science.pressure import station_pressure_flags
from core.science.temperature import fahrenheit_hint

__all__ = ["Assessment", "assess_reading", "SALINITY_SOURCES"]

SALINITY_SOURCES = ("given", "conductivity", "default")


@dataclass(frozen=True)
class Assessment:
    """The result of :func:`assess_reading` (all concentrations mg/L, pressure hPa, temperature °C)."""

    do_sat_mg_l: float
    percent_saturation: float | None
    do_mg_l: float | None
    salinity: float
    salinity_source: str
    specific_conductance_us_cm: float | None
    pressure_hpa: float
    temp_c: float
    method: str
    core_version: str
    flags: list[Flag] = field(default_factory=list)
    percent_basis: str = "local"

    def to_dict(self) -> dict:
        """The `streamtab sat --json` fields (do_sat_mg_l, percent_saturation, salinity, pressure_hpa,
        temp_c, method, flags) followed by the extras (do_mg_l, salinity_source,
        specific_conductance_us_cm, core_version, percent_basis). ``percent_saturation`` is always
        against the local pressure, whatever the meter's % basis."""
        return {
            "do_sat_mg_l": self.do_sat_mg_l,
            "percent_saturation": self.percent_saturation,
            "salinity": self.salinity,
            "pressure_hpa": self.pressure_hpa,
            "temp_c": self.temp_c,
            "method": self.method,
            "flags": [f.to_dict() for f in self.flags],
            "do_mg_l": self.do_mg_l,
            "salinity_source": self.salinity_source,
            "specific_conductance_us_cm": self.specific_conductance_us_cm,
            "core_version": self.core_version,
            "percent_basis": self.percent_basis,
        }


def assess_reading(
    temp_c,
    pressure_hpa,
    *,
    salinity=None,
    conductivity_us_cm=None,
    conductivity_is_sc25=False,
    do_mg_l=None,
    do_percent=None,
    method="benson-krause",
    elevation_m=None,
    water_class=None,
    criteria=None,
    percent_basis="local",
    compensation="linear",
    alpha=cond.KCL_ALPHA_PER_C,
) -> Assessment:
    """Assesses one reading: the saturation target and everything a technician should look at.

    Parameters
    ----------
    temp_c : float
        Water temperature, °C.
    pressure_hpa : float
        Station barometric pressure, hPa.
    salinity : float, optional
        Practical salinity, if known. Give this or ``conductivity_us_cm``, not both; with neither, 0.
    conductivity_us_cm : float, optional
        Conductivity, µS/cm: at the water temperature (salinity by PSS-78 from it and ``temp_c``;
        specific conductance by the linear α = 0.0191 law), or already specific conductance at 25 °C
        when ``conductivity_is_sc25`` is true.
    conductivity_is_sc25 : bool
        Whether ``conductivity_us_cm`` is specific conductance at 25 °C.
    do_mg_l, do_percent : float, optional
        The DO reading, in mg/L or in % saturation (not both); the other is derived. ``do_percent`` is
        the meter's %, on its ``percent_basis``.
    method : {"benson-krause", "garcia-gordon"}
        Saturation equation (:func:`core.science.oxygen.do_saturation_mg_l`).
    elevation_m : float, optional
        Site elevation, m; enables the station-pressure checks (sea-level adjusted; far below standard).
    water_class : {"warm", "cold"}, optional
        The stream's class for the criteria check.
    criteria : core.science.criteria.Criteria, optional
        The program's criteria; default ``Criteria()``.
    compensation : {"linear", "iso7888"}
        Temperature compensation of the specific conductance (a program setting): linear with
        ``alpha`` (0.015–0.030 /°C), or the ISO 7888 natural-water table; outside the table's 0–35.9 °C
        the linear law is used with a note.
    alpha : float
        Linear coefficient, 1/°C; default 0.0191 (KCl, Standard Methods 2510 B [from memory]).
    percent_basis : {"local", "sea-level"}
        What the meter's 100 % means (:data:`core.science.oxygen.PERCENT_BASES`): saturation at the
        station pressure, or at 760 mmHg. The returned ``percent_saturation`` is always against the
        station pressure.

    Returns
    -------
    Assessment
        The values and every flag raised (unit hints, fitted ranges, pressure checks, criteria).

    Raises
    ------
    ValueError
        Any impossible input, or both of an either/or pair given.
    """
    method = choice(method, "method", oxygen.METHODS)
    percent_basis = choice(percent_basis, "percent_basis", oxygen.PERCENT_BASES)
    t = real(temp_c, "temp_c", lo=-5.0, hi=90.0, unit="°C")
    p = real(pressure_hpa, "pressure_hpa", lo=0.0, hi=1500.0, lo_open=True, unit="hPa")
    if not isinstance(t, float) or not isinstance(p, float):
        raise ValueError("temp_c and pressure_hpa must be single numbers for assess_reading")
    if salinity is not None and conductivity_us_cm is not None:
        raise ValueError(
            "salinity and conductivity_us_cm were both given; accepted: one of them (salinity"
            " is derived from conductivity)"
        )
    if do_mg_l is not None and do_percent is not None:
        raise ValueError("do_mg_l and do_percent were both given; accepted: one DO reading, in mg/L or in %")

    sc25 = None
    comp_note = None
    if salinity is not None:
        s = real(salinity, "salinity", lo=0.0, hi=70.0)
        source = "given"
    elif conductivity_us_cm is not None:
        k = real(conductivity_us_cm, "conductivity_us_cm", lo=0.0, hi=300000.0, unit="µS/cm")
        if conductivity_is_sc25:
            sc25 = k
            s = cond.salinity_from_specific_conductance(k)
        else:
            method_sc = choice(compensation, "compensation", cond.COMPENSATION_METHODS)
            if method_sc == "iso7888" and not (0.0 <= t < 36.0):
                method_sc = "linear"
                comp_note = Flag(
                    "conductivity.compensation_linear",
                    Severity.NOTE,
                    f"The ISO 7888 table covers 0–35.9 °C; at {t:g} °C the specific conductance uses the linear"
                    f" law with α = {float(alpha):g} /°C instead.",
                    "Nothing to do; the program's compensation setting applies inside the table's range.",
                    "conductivity",
                )
            sc25 = cond.specific_conductance_us_cm(k, t, method_sc, alpha)
            s = cond.practical_salinity(k / 1000.0, t)
        source = "conductivity"
    else:
        s = 0.0
        source = "default"
    s = float(s)

    flags: list[Flag] = []
    if s < 0.0:
        # PSS-78 with Hill et al. dips just below zero for nearly pure water (< ~2–3 µS/cm); say so and use 0.
        flags.append(
            Flag(
                "salinity.below_formula_range",
                Severity.NOTE,
                f"Conductivity {float(conductivity_us_cm):g} µS/cm is below what PSS-78 resolves (it gives"
                f" {s:.5f}); salinity is taken as 0, which changes the saturation by less than 0.001 %.",
                "Nothing to do unless the meter should read more: check the conductivity cell.",
                "salinity",
            )
        )
        s = 0.0
    if comp_note is not None:
        flags.append(comp_note)
    hint = fahrenheit_hint(t)
    if hint is not None:
        flags.append(hint)
    flags.extend(oxygen.saturation_range_flags(t, p, s))
    if elevation_m is not None:
        flags.extend(station_pressure_flags(p, float(real(elevation_m, "elevation_m"))))

    sat = float(oxygen.do_saturation_mg_l(t, p, s, method))
    pct = None
    do = None
    if do_mg_l is not None:
        do = real(do_mg_l, "do_mg_l", lo=0.0, hi=70.0, unit="mg/L")
        pct = float(oxygen.percent_saturation(do, sat))
    elif do_percent is not None:
        meter_pct = real(do_percent, "do_percent", lo=0.0, hi=500.0, unit="%")
        do = float(oxygen.meter_percent_to_mg_l(meter_pct, t, p, s, percent_basis, method))
        pct = float(oxygen.percent_saturation(do, sat)) if percent_basis != "local" else meter_pct
        if percent_basis != "local":
            flags.append(
                Flag(
                    "do.percent_basis_sea_level",
                    Severity.NOTE,
                    f"The meter's {meter_pct:g} % is against 760 mmHg: {do:.2f} mg/L, which is {pct:.1f} % of"
                    f" saturation at this stop's {p:.1f} hPa.",
                    "Nothing to do if the meter is set to a 760 mmHg basis; if it reports against local pressure,"
                    " change the meter's % basis in the trip or the program settings.",
                    "do",
                )
            )
    if do is not None:
        flags.extend(do_criteria_flags(do, pct, water_class, criteria if criteria is not None else Criteria()))
    elif water_class is not None or criteria is not None:
        do_criteria_flags(0.0, None, water_class, criteria)  # still validates the class and criteria

    return Assessment(
        do_sat_mg_l=sat,
        percent_saturation=pct,
        do_mg_l=do,
        salinity=s,
        salinity_source=source,
        specific_conductance_us_cm=None if sc25 is None else float(sc25),
        pressure_hpa=p,
        temp_c=t,
        method=method,
        core_version=core.version(),
        flags=flags,
        percent_basis=percent_basis,
    )
