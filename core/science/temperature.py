"""Water temperature: °C and °F, parsing with units, and a hint when a °C value looks like °F."""
from __future__ import annotations

import re

from core.science._validate import decimal, real
from core.flags import Flag, Severity

__all__ = ["TEMPERATURE_UNITS", "f_to_c", "c_to_f", "parse_temperature", "fahrenheit_hint",
           "FAHRENHEIT_HINT_RANGE_C"]

TEMPERATURE_UNITS: tuple[str, ...] = ("C", "F", "K")
_ALIASES = {"c": "C", "°c": "C", "degc": "C", "celsius": "C", "ºc": "C",
            "f": "F", "°f": "F", "degf": "F", "fahrenheit": "F", "ºf": "F",
            "k": "K", "kelvin": "K"}
_NUMBER_UNIT = re.compile(r"^\s*([+-]?(?:\d+(?:[.,]\d*)?|[.,]\d+))\s*([^\d\s].*?)?\s*$")

#: A value given as °C inside this range is hotter than streams run, but as °F it would be 4.4–40 °C:
#: the usual sign that a °F reading went into a °C field. [common practice; our choice]
FAHRENHEIT_HINT_RANGE_C = (40.0, 104.0)


def f_to_c(x):
    """Degrees Fahrenheit to degrees Celsius, (x − 32)·5/9; x ≥ −459.67 °F (absolute zero)."""
    v = real(x, "temp_f", lo=-459.67, unit="°F", note=" (absolute zero is -459.67 °F)")
    return (v - 32.0) * (5.0 / 9.0)


def c_to_f(x):
    """Degrees Celsius to degrees Fahrenheit, x·9/5 + 32; x ≥ −273.15 °C (absolute zero)."""
    v = real(x, "temp_c", lo=-273.15, unit="°C", note=" (absolute zero is -273.15 °C)")
    return v * 1.8 + 32.0


def parse_temperature(text: str, default_unit: str = "C") -> float:
    """Reads a temperature such as ``"18.5"``, ``"18,5 °C"``, ``"65 F"`` or ``"291.65 K"`` and returns °C.

    Parameters
    ----------
    text : str
        A number, optionally followed by a unit: C, °C, degC, F, °F, degF, K (case-insensitive).
        A decimal comma is accepted.
    default_unit : {"C", "F"}
        Unit of a bare number.

    Returns
    -------
    float
        Temperature in °C (ITS-90 as the meter reports it).

    Raises
    ------
    ValueError
        Empty text, an unknown unit, or a temperature below absolute zero.
    """
    du = _ALIASES.get(str(default_unit).strip().lower())
    if du is None:
        raise ValueError(f"default_unit = {default_unit!r} is not a temperature unit; accepted: C, F, K")
    if not isinstance(text, str) or not text.strip():
        raise ValueError(f"temperature {text!r} is empty; write a number, optionally with a unit C or F"
                         " (e.g. '18.5' or '65 F')")
    m = _NUMBER_UNIT.match(text)
    if m is None or ("," in text and "." in text):
        raise ValueError(f"temperature {text!r} is not a number with an optional unit; accepted units:"
                         " C, F, K (e.g. '18.5 C')")
    value = decimal(m.group(1), "temperature")
    unit: str | None = du
    if m.group(2):
        unit = _ALIASES.get(m.group(2).strip().lower().replace(" ", ""))
        if unit is None:
            raise ValueError(f"temperature {text!r} has an unknown unit {m.group(2).strip()!r};"
                             " accepted units: C, F, K")
    if unit == "F":
        return f_to_c(value)
    if unit == "K":
        return real(value, "temperature", lo=0.0, unit="K", note=" (absolute zero)") - 273.15
    return real(value, "temperature", lo=-273.15, unit="°C", note=" (absolute zero is -273.15 °C)")


def fahrenheit_hint(temp_c: float) -> Flag | None:
    """Hints that a value entered as °C may be °F.

    Parameters
    ----------
    temp_c : float
        The value as entered, taken as °C.

    Returns
    -------
    Flag or None
        ``temp.looks_fahrenheit`` (warning) when ``temp_c`` is above 40 °C and at most 104 °C, i.e.
        hotter than streams run while the same number in °F is 4.4–40 °C; else None.
    """
    t = real(temp_c, "temp_c", lo=-273.15, unit="°C")
    lo, hi = FAHRENHEIT_HINT_RANGE_C
    if not (lo < t <= hi):
        return None
    as_c = (t - 32.0) * 5.0 / 9.0
    return Flag(
        code="temp.looks_fahrenheit",
        severity=Severity.WARNING,
        message=(f"Water temperature {t:g} °C is hotter than streams run; read as °F it would be"
                 f" {as_c:.1f} °C."),
        action="Check the meter's unit; if the reading was °F, enter it as °F or convert it to °C.",
        field="temp_c",
    )
