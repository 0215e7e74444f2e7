"""DO meter air calibration: the 100 % saturation target and the pre-trip and post-trip checks."""

from __future__ import annotations

from dataclasses import dataclass, field

from core.flags import Flag, Severity
from core.science._validate import real
from core.science.oxygen import do_saturation_mg_l, saturation_range_flags

__all__ = [
    "DEFAULT_TOLERANCE_MG_L",
    "CalibrationResult",
    "calibration_target_mg_l",
    "check_calibration",
    "post_trip_check",
    "ZERO_DO_LIMIT_MG_L",
    "BAROMETER_LIMIT_HPA",
    "DRIFT_UNITS",
    "drift_tolerance_mg_l",
    "instrument_flags",
]

#: Acceptance of a calibration or post-trip check, ± mg/L. [common practice; a program setting]
DEFAULT_TOLERANCE_MG_L = 0.2


@dataclass(frozen=True)
class CalibrationResult:
    """Outcome of a calibration check (all mg/L); ``difference_mg_l`` = reading − target."""

    target_mg_l: float
    reading_mg_l: float
    difference_mg_l: float
    tolerance_mg_l: float
    passed: bool
    flags: list[Flag] = field(default_factory=list)

    def to_dict(self) -> dict:
        return {
            "target_mg_l": self.target_mg_l,
            "reading_mg_l": self.reading_mg_l,
            "difference_mg_l": self.difference_mg_l,
            "tolerance_mg_l": self.tolerance_mg_l,
            "passed": self.passed,
            "flags": [f.to_dict() for f in self.flags],
        }


def calibration_target_mg_l(temp_c, pressure_hpa, method="benson-krause"):
    """The 100 % saturation target of an air calibration, mg/L.

    Saturation in water-saturated air (or air-saturated water) at the calibration temperature and
    station pressure, S = 0: :func:`core.science.oxygen.do_saturation_mg_l` ``(temp_c, pressure_hpa, 0, method)``.

    Parameters
    ----------
    temp_c : float or array_like
        Temperature in the calibration chamber, °C (fitted 0–40).
    pressure_hpa : float or array_like
        Station (true) barometric pressure at calibration, hPa.
    method : {"benson-krause", "garcia-gordon"}

    Returns
    -------
    float or numpy.ndarray
        Target DO, mg/L.

    References
    ----------
    USGS National Field Manual for the Collection of Water-Quality Data, chapter A6.2 (version 3.0, 2013).
    """
    return do_saturation_mg_l(temp_c, pressure_hpa, 0.0, method)


def _check(kind: str, reading_mg_l, temp_c, pressure_hpa, tolerance_mg_l, method) -> CalibrationResult:
    reading = real(reading_mg_l, "reading_mg_l", lo=0.0, hi=70.0, unit="mg/L")
    tol = real(tolerance_mg_l, "tolerance_mg_l", lo=0.0, hi=5.0, lo_open=True, unit="mg/L")
    t = real(temp_c, "temp_c", lo=-5.0, hi=90.0, unit="°C")
    p = real(pressure_hpa, "pressure_hpa", lo=0.0, hi=1500.0, lo_open=True, unit="hPa")
    if not all(isinstance(v, float) for v in (reading, tol, t, p)):
        raise ValueError("reading_mg_l, temp_c, pressure_hpa and tolerance_mg_l must be single numbers")
    target = float(calibration_target_mg_l(t, p, method))
    diff = reading - target
    passed = abs(diff) <= tol + 1e-12
    flags = list(saturation_range_flags(t, p, 0.0))
    if not passed:
        if kind == "pre":
            flags.append(
                Flag(
                    "calibration.out_of_tolerance",
                    Severity.STOP,
                    f"The meter reads {reading:.2f} mg/L against a 100 % target of {target:.2f} mg/L"
                    f" ({diff:+.2f} mg/L, outside ±{tol:g} mg/L).",
                    "Check the membrane or sensor cap, the wet sponge and the temperature and pressure entered,"
                    " then calibrate again before measuring.",
                    "reading_mg_l",
                )
            )
        else:
            flags.append(
                Flag(
                    "calibration.post_trip_drift",
                    Severity.STOP,
                    f"After the trip the meter reads {reading:.2f} mg/L against a 100 % target of {target:.2f}"
                    f" mg/L ({diff:+.2f} mg/L, outside ±{tol:g} mg/L): readings since the last calibration"
                    " may be off by up to that much.",
                    "Record the drift with the trip; the program's SOP decides whether the readings are"
                    " qualified, corrected or rejected.",
                    "reading_mg_l",
                )
            )
    return CalibrationResult(
        target_mg_l=target, reading_mg_l=reading, difference_mg_l=diff, tolerance_mg_l=tol, passed=passed, flags=flags
    )


def check_calibration(
    reading_mg_l, temp_c, pressure_hpa, tolerance_mg_l=DEFAULT_TOLERANCE_MG_L, method="benson-krause"
) -> CalibrationResult:
    """Compares the meter's reading right after air calibration with the 100 % target.

    Parameters
    ----------
    reading_mg_l : float
        The meter's DO reading in the calibration chamber, mg/L.
    temp_c : float
        Chamber temperature, °C.
    pressure_hpa : float
        Station barometric pressure, hPa.
    tolerance_mg_l : float
        Acceptance, ± mg/L; default 0.2 (common practice; a program setting).
    method : {"benson-krause", "garcia-gordon"}

    Returns
    -------
    CalibrationResult
        ``passed`` when |reading − target| ≤ tolerance; else a ``calibration.out_of_tolerance``
        flag (stop-and-check).
    """
    return _check("pre", reading_mg_l, temp_c, pressure_hpa, tolerance_mg_l, method)


def post_trip_check(
    reading_mg_l, temp_c, pressure_hpa, tolerance_mg_l=DEFAULT_TOLERANCE_MG_L, method="benson-krause"
) -> CalibrationResult:
    """Checks the meter against the 100 % target at the end of a trip (drift check).

    Same arguments as :func:`check_calibration`; a failure gives ``calibration.post_trip_drift``
    (stop-and-check): the trip's readings may be biased, and the program's SOP decides what follows.
    """
    return _check("post", reading_mg_l, temp_c, pressure_hpa, tolerance_mg_l, method)


#: A meter in zero-DO solution (sodium sulfite) should read below this, mg/L. [common practice]
ZERO_DO_LIMIT_MG_L = 0.2
#: The meter's barometer against a reference barometer, largest accepted difference, hPa.
#: [common practice; our choice: about 1.5 mmHg]
BAROMETER_LIMIT_HPA = 2.0
#: Units a drift limit may be written in: mg/L, or % of the 100 % target.
DRIFT_UNITS = ("mg/L", "%")


def drift_tolerance_mg_l(limit, unit: str, target_mg_l) -> float:
    """A post-trip drift limit in mg/L from a limit in mg/L or in % of the 100 % target.

    Parameters
    ----------
    limit : float
        The instrument's drift limit (> 0; at most 5 mg/L or 50 %).
    unit : {"mg/L", "%"}
    target_mg_l : float
        The 100 % saturation target of the check, mg/L (> 0).
    """
    if unit not in DRIFT_UNITS:
        raise ValueError(f"unit = {unit!r} is not a drift unit; accepted: {', '.join(DRIFT_UNITS)}")
    lim = real(limit, "limit", lo=0.0, hi=5.0 if unit == "mg/L" else 50.0, lo_open=True, unit=unit)
    if unit == "mg/L":
        return float(lim)
    return float(real(target_mg_l, "target_mg_l", lo=0.0, lo_open=True, unit="mg/L")) * float(lim) / 100.0


def instrument_flags(
    serial: str,
    *,
    zero_do_mg_l=None,
    zero_do_limit_mg_l=ZERO_DO_LIMIT_MG_L,
    barometer_difference_hpa=None,
    barometer_limit_hpa=BAROMETER_LIMIT_HPA,
) -> list[Flag]:
    """Findings of an instrument's calibration log: the zero-DO check and the reference-barometer check.

    Parameters
    ----------
    serial : str
        The meter's serial number, as the crew reads it on the meter.
    zero_do_mg_l : float, optional
        The meter's reading in zero-DO solution, mg/L.
    zero_do_limit_mg_l : float
        Largest accepted zero reading, mg/L; default 0.2 [common practice].
    barometer_difference_hpa : float, optional
        The meter's barometer minus a reference barometer at the same place and time, hPa.
    barometer_limit_hpa : float
        Largest accepted difference, hPa; default 2.0 [common practice].

    Returns
    -------
    list of Flag
        ``instrument.zero_do`` (warning) above the zero limit; ``instrument.barometer`` (warning) outside
        ± the barometer limit.

    References
    ----------
    USGS National Field Manual, chapter A6.2 (2013) for the zero-DO and barometer checks [source for the
    method; memory for the limits, which are common practice].
    """
    flags: list[Flag] = []
    if zero_do_mg_l is not None:
        z = real(zero_do_mg_l, "zero_do_mg_l", lo=-5.0, hi=25.0, unit="mg/L")
        lim = real(zero_do_limit_mg_l, "zero_do_limit_mg_l", lo=0.0, hi=2.0, lo_open=True, unit="mg/L")
        if z > lim:
            flags.append(
                Flag(
                    "instrument.zero_do",
                    Severity.WARNING,
                    f"Meter {serial} read {z:.2f} mg/L in zero-DO solution, above the {lim:g} mg/L limit: the sensor"
                    " reads high at low oxygen.",
                    "Change the membrane or sensor cap (or service the meter) and repeat the zero check before"
                    " trusting low readings.",
                    "zero_do_mg_l",
                )
            )
    if barometer_difference_hpa is not None:
        d = real(barometer_difference_hpa, "barometer_difference_hpa", lo=-200.0, hi=200.0, unit="hPa")
        lim = real(barometer_limit_hpa, "barometer_limit_hpa", lo=0.0, hi=20.0, lo_open=True, unit="hPa")
        if abs(d) > lim:
            flags.append(
                Flag(
                    "instrument.barometer",
                    Severity.WARNING,
                    f"Meter {serial}'s barometer differs from the reference by {d:+.1f} hPa, more than ±{lim:g} hPa:"
                    f" its calibration targets are off by about {abs(d) / 10.13:.1f} %.",
                    "Have the meter's barometer recalibrated, or enter the reference barometer's reading at"
                    " calibration.",
                    "barometer_difference_hpa",
                )
            )
    return flags
