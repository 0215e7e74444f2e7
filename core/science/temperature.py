"""Water temperature: °C and °F, parsing with units, and a hint when a °C value looks like °F."""

from __future__ import annotations

from core.flags import Flag, Severity
from core.science._validate import real

__all__ = [
    "TEMPERATURE_UNITS",
    "f_to_c",
    "c_to_f",
    "fahrenheit_hint",
    "FAHRENHEIT_HINT_RANGE_C",
    "FAHRENHEIT_NOTE_RANGE_C",
]

TEMPERATURE_UNITS: tuple[str, ...] = ("C", "F", "K")

#: A value given as °C inside this range is hotter than streams run, but as °F it would be 4.4–40 °C:
#: the usual sign that a °F reading went into a °C field. [common practice; our choice]
FAHRENHEIT_HINT_RANGE_C = (40.0, 104.0)
#: A value given as °C inside this range is possible in a warm stream, but winter water typed in °F
#: (32–40 °F, i.e. 0–4.4 °C) lands here too and halves the saturation error budget: a gentle note.
#: [common practice; our choice]
FAHRENHEIT_NOTE_RANGE_C = (32.0, 40.0)


def f_to_c(x):
    """Degrees Fahrenheit to degrees Celsius, (x − 32)·5/9; x ≥ −459.67 °F (absolute zero)."""
    v = real(x, "temp_f", lo=-459.67, unit="°F", note=" (absolute zero is -459.67 °F)")
    return (v - 32.0) * (5.0 / 9.0)


def c_to_f(x):
    """Degrees Celsius to degrees Fahrenheit, x·9/5 + 32; x ≥ −273.15 °C (absolute zero)."""
    v = real(x, "temp_c", lo=-273.15, unit="°C", note=" (absolute zero is -273.15 °C)")
    return v * 1.8 + 32.0


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
        hotter than streams run while the same number in °F is 4.4–40 °C; ``temp.maybe_fahrenheit``
        (note) when it is above 32 °C and at most 40 °C (possible in a warm stream, but winter water
        typed in °F, 0–4.4 °C, lands here too); else None.
    """
    t = real(temp_c, "temp_c", lo=-273.15, unit="°C")
    as_c = (t - 32.0) * 5.0 / 9.0
    nlo, nhi = FAHRENHEIT_NOTE_RANGE_C
    if nlo < t <= nhi:
        return Flag(
            code="temp.maybe_fahrenheit",
            severity=Severity.NOTE,
            message=(
                f"Water temperature {t:g} °C is warm for a stream; if this was °F it is {as_c:.1f} °C"
                " (near-freezing winter water), which changes the saturation by about half."
            ),
            action="Nothing to do if the water is this warm; if the meter shows °F, enter the unit as °F.",
            field="temp_c",
        )
    lo, hi = FAHRENHEIT_HINT_RANGE_C
    if not (lo < t <= hi):
        return None
    return Flag(
        code="temp.looks_fahrenheit",
        severity=Severity.WARNING,
        message=(f"Water temperature {t:g} °C is hotter than streams run; read as °F it would be {as_c:.1f} °C."),
        action="Check the meter's unit; if the reading was °F, enter it as °F or convert it to °C.",
        field="temp_c",
    )
