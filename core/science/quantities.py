"""The one grammar for values a person types (numbers, units) and the one table of their limits.

Every shell reads typed values here: the records (core.records.models), the command line and the touch
app. A value is a number, optionally followed by a unit::

    number  = [+|-] (digits [(.|,) digits] | (.|,) digits) [(e|E) [+|-] digits]
    value   = number [spaces] [unit]

A decimal comma reads as a point ("3,5" → 3.5); "1,234" (decimal or thousands comma?) is refused, the
rule of :func:`core.science._validate.decimal`; a point and a comma together are refused (no
thousands separators). Each kind of quantity has its units, the unit a bare number is in (or none:
the unit is then required), and hard limits (:data:`LIMITS`) outside which a value is a typing or
unit mistake rather than a reading. Limits are wider than the fitted range of the saturation
equations: values between the two compute and carry a QC flag.

Messages name the field or option as the person sees it (the ``label`` the caller gives, e.g.
``"--do"`` or ``"Water temperature"``), say what was wrong and what is accepted.
"""

from __future__ import annotations

import functools
import math
import re
from collections.abc import Callable
from dataclasses import dataclass

from core.science._validate import ambiguous_comma

__all__ = [
    "LIMITS",
    "KINDS",
    "UNITS_TEXT",
    "QuantityError",
    "canonical_unit",
    "kinds",
    "Reading",
    "read",
    "read_number",
    "check_limit",
    "range_message",
    "range_text",
    "split",
]

#: Hard limits of a typed value, by limit key: (low, high, normalised unit). All common practice for
#: stream work (no published source), chosen so that a real stream reading is never refused and a
#: value in the wrong unit usually is.
LIMITS: dict[str, tuple[float, float, str]] = {
    "temp": (-2.0, 50.0, "°C"),  # sea water freezes near -2 °C; hot springs aside
    "pressure": (400.0, 1100.0, "hPa"),  # station pressure at 6000 m (≈ 472 hPa) to a record high
    "conductivity": (0.0, 100000.0, "µS/cm"),  # beyond sea water (≈ 53 000 µS/cm at 25 °C)
    "salinity": (0.0, 42.0, ""),  # PSS-78's upper limit (UNESCO 1981)
    "do_mg_l": (0.0, 25.0, "mg/L"),
    "do_percent": (0.0, 300.0, "%"),
    "elevation": (-430.0, 6000.0, "m"),  # the Dead Sea shore to the highest sampled streams
    "latitude": (-90.0, 90.0, "°"),
    "longitude": (-180.0, 180.0, "°"),
    "calibration_reading": (0.0, 25.0, "mg/L"),
    "criterion": (0.0, 20.0, "mg/L"),  # the range core.science.criteria accepts
    # a threshold above the highest % saturation a meter reading may carry ("do_percent") could never fire
    "supersaturation": (100.0, 300.0, "%"),
    "tolerance": (0.0, 5.0, "mg/L"),
}

#: What the usual mistake is when a value is above its limit; a function of the value where the
#: hint names a corrected entry.
_HINTS_ABOVE: dict[str, Callable[[float], str]] = {
    "temp": lambda v: " — was it entered in °F?",
    "pressure": lambda v: " — was it in another unit (inHg, kPa, mmHg)?",
    "conductivity": lambda v: " — check the unit (µS/cm, mS/cm, mS/m).",
    "do_mg_l": lambda v: f" — did you mean {_g(v)} %?" if v <= LIMITS["do_percent"][1] else ".",
    "do_percent": lambda v: ".",
    "elevation": lambda v: " — elevation is in metres; was it in feet?",
    "calibration_reading": lambda v: " — was it % saturation?",
}
_HINTS_BELOW: dict[str, Callable[[float], str]] = {
    "pressure": lambda v: " — was it in another unit (kPa, inHg, atm)?",
    "elevation": lambda v: " — elevation is in metres above sea level.",
}


def _q(text: str) -> str:
    """Typed text quoted for a one-line message: control characters shown as spaces, long text cut."""
    flat = "".join(ch if ch.isprintable() else " " for ch in text)
    return f"“{flat if len(flat) <= 40 else flat[:37] + '...'}”"


def _g(v: float) -> str:
    text = f"{v:g}"
    return "\u2212" + text[1:] if text.startswith("-") else text


def range_text(key: str) -> str:
    """The accepted range of a limit key in words, e.g. ``"400–1100 hPa"``."""
    lo, hi, unit = LIMITS[key]
    return f"{_g(lo)}–{_g(hi)}{(' ' + unit) if unit else ''}"


def range_message(key: str, label: str, value: object, unit: str | None = None, typed: str = "") -> str:
    """The one sentence for a value outside its limits, e.g.
    ``"--do 60 mg/L is outside 0–25 mg/L — did you mean 60 %?"``; ``typed`` (the text as typed) is
    shown beside the value when a unit was converted."""
    lo, hi, lim_unit = LIMITS[key]
    unit = lim_unit if unit is None else unit
    u = f" {unit}" if unit else ""
    try:
        v = float(value)  # type: ignore[arg-type]  # anything float() takes; the rest shows as typed
    except (TypeError, ValueError):
        v = math.nan
    hint = "."
    if v > hi and key in _HINTS_ABOVE:
        hint = _HINTS_ABOVE[key](v)
    elif v < lo and key in _HINTS_BELOW:
        hint = _HINTS_BELOW[key](v)
    shown = _g(v) if math.isfinite(v) else str(value)
    if typed:
        return f"{label} {_q(typed)} ({shown}{u}) is outside {_g(lo)}–{_g(hi)}{u}{hint}"
    return f"{label} {shown}{u} is outside {_g(lo)}–{_g(hi)}{u}{hint}"


@dataclass(frozen=True)
class Kind:
    """One kind of typed quantity: its units (spelling → canonical), how each converts, the limits."""

    name: str
    unit: str  # normalised unit of `value`
    aliases: dict[str, str]  # lower-case spelling without spaces → canonical unit
    to_normal: dict[str, Callable[[float], float]]
    bare: str | None  # unit of a bare number; None: a unit is required
    units_text: str  # accepted units, in words
    example: str


def _scale(f: float) -> Callable[[float], float]:
    return lambda v: v * f


def _kinds() -> dict[str, Kind]:
    from core.science.conductivity import US_CM_PER_UNIT
    from core.science.pressure import HPA_PER_UNIT, PRESSURE_UNITS

    p_alias = {
        "hpa": "hPa",
        "mbar": "mbar",
        "mb": "mbar",
        "millibar": "mbar",
        "millibars": "mbar",
        "kpa": "kPa",
        "pa": "Pa",
        "mmhg": "mmHg",
        "torr": "torr",
        "inhg": "inHg",
        "in.hg": "inHg",
        '"hg': "inHg",
        "atm": "atm",
        "psi": "psi",
        "psia": "psi",
    }
    c_alias = {
        "us/cm": "uS/cm",
        "µs/cm": "uS/cm",
        "μs/cm": "uS/cm",
        "umho/cm": "uS/cm",
        "µmho/cm": "uS/cm",
        "μmho/cm": "uS/cm",
        "ms/cm": "mS/cm",
        "mmho/cm": "mS/cm",
        "ms/m": "mS/m",
        "s/m": "S/m",
    }
    t_alias = {
        "c": "C",
        "°c": "C",
        "degc": "C",
        "celsius": "C",
        "ºc": "C",
        "f": "F",
        "°f": "F",
        "degf": "F",
        "fahrenheit": "F",
        "ºf": "F",
        "k": "K",
        "kelvin": "K",
    }
    do_alias = {
        "mg/l": "mg/L",
        "mgl": "mg/L",
        "mg/litre": "mg/L",
        "mg/liter": "mg/L",
        "%": "%",
        "%sat": "%",
        "%saturation": "%",
        "percent": "%",
    }
    return {
        "temp": Kind(
            "temp",
            "°C",
            t_alias,
            {"C": lambda v: v, "F": lambda v: (v - 32.0) * 5.0 / 9.0, "K": lambda v: v - 273.15},
            "C",
            "°C, °F or K (a bare number is °C)",
            "18.5",
        ),
        "pressure": Kind(
            "pressure",
            "hPa",
            p_alias,
            {u: _scale(HPA_PER_UNIT[u]) for u in PRESSURE_UNITS},
            None,
            ", ".join(PRESSURE_UNITS),
            "752 mmHg",
        ),
        "conductivity": Kind(
            "conductivity",
            "µS/cm",
            c_alias,
            {u: _scale(US_CM_PER_UNIT[u]) for u in ("uS/cm", "mS/cm", "mS/m", "S/m")},
            None,
            "uS/cm (µS/cm), mS/cm, mS/m, S/m",
            "410 uS/cm",
        ),
        "salinity": Kind(
            "salinity",
            "",
            {"psu": "psu", "pss": "psu", "pss-78": "psu"},
            {"psu": lambda v: v},
            "psu",
            "a practical salinity, bare or with psu",
            "0.2",
        ),
        "elevation": Kind(
            "elevation",
            "m",
            {
                "m": "m",
                "metre": "m",
                "metres": "m",
                "meter": "m",
                "meters": "m",
                "ft": "ft",
                "feet": "ft",
                "foot": "ft",
            },
            {"m": lambda v: v, "ft": lambda v: v * 0.3048},  # international foot, exact
            "m",
            "m or ft (a bare number is metres)",
            "1200 m",
        ),
        "do": Kind(
            "do", "mg/L", do_alias, {"mg/L": lambda v: v, "%": lambda v: v}, None, "mg/L or % saturation", "8.4 mg/L"
        ),
    }


@functools.cache
def kinds() -> dict[str, Kind]:
    """The kinds of typed quantity (built on first use: no work at import time)."""
    return _kinds()


KINDS = ("temp", "pressure", "conductivity", "salinity", "elevation", "do")
#: Accepted units of each kind, in words (for help texts and messages).
UNITS_TEXT = {
    "temp": "°C, °F or K",
    "pressure": "hPa, mbar, kPa, Pa, mmHg, torr, inHg, atm, psi",
    "conductivity": "uS/cm (µS/cm), mS/cm, mS/m, S/m",
    "salinity": "psu or none",
    "elevation": "m or ft",
    "do": "mg/L or %",
}


def canonical_unit(kind: str, unit: str) -> str | None:
    """The canonical unit of a spelling (case and spaces ignored), e.g. ("pressure", "MB") → "mbar"."""
    if not isinstance(unit, str):
        return None
    return kinds()[kind].aliases.get(unit.lower().replace(" ", ""))


class QuantityError(ValueError):
    """A typed value that cannot be accepted: a stable ``code``, the ``label`` and one sentence."""

    def __init__(self, code: str, label: str, message: str, *, limit: str | None = None):
        super().__init__(message)
        self.code = code
        self.label = label
        self.message = message
        self.limit = limit


@dataclass(frozen=True)
class Reading:
    """A value as typed and as read: ``number`` in ``entered_unit``, ``value`` in ``unit`` (normalised)."""

    kind: str
    text: str
    number: float
    entered_unit: str  # the unit as typed (or the bare number's unit), stripped
    value: float
    unit: str  # normalised unit: °C, hPa, µS/cm, "", m, mg/L or %
    limit: str  # the key of LIMITS the value was checked against


_NUMBER = r"[+-]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][+-]?\d+)?"
_VALUE = re.compile(rf"^\s*({_NUMBER})\s*(.*?)\s*$")
_NOT_FINITE = {"nan", "inf", "infinity"}


def split(text: str) -> tuple[str, str] | None:
    """(number text, unit text) of a typed value, or None when it does not start with a number."""
    m = _VALUE.match(text)
    if m is None:
        return None
    unit = m.group(2)
    if unit and unit[0] in "0123456789.,+-":  # "1 000 hPa", "1,2,3": not one number
        return None
    return m.group(1), unit


def _not_a_number(raw: str, label: str, how: str) -> QuantityError:
    """`how` completes "…is not a number; " (e.g. "type a number with a unit, …" or "accepted: …")."""
    m = re.match(r"^[+-]?[\d.,]*", raw)
    head = m.group(0) if m else ""
    if "," in head and "." in head:
        return _mixed_marks(raw, label)
    return QuantityError("number.invalid", label, f"{label}: {_q(raw)} is not a number; {how}")


def _mixed_marks(raw: str, label: str) -> QuantityError:
    return QuantityError(
        "number.invalid",
        label,
        f"{label}: {_q(raw)} has both a decimal comma and a decimal point; type one decimal"
        " mark and no thousands separators, e.g. 1002.3",
    )


def _number_value(num: str, label: str, raw: str) -> float:
    if "," in num and "." in num:
        raise QuantityError(
            "number.invalid",
            label,
            f"{label}: {_q(raw)} has both a decimal comma and a decimal point; type one decimal"
            " mark and no thousands separators, e.g. 1002.3",
        )
    if ambiguous_comma(num.split("e")[0].split("E")[0]):
        a, b = num.replace(",", "."), num.replace(",", "")
        raise QuantityError(
            "number.ambiguous_comma",
            label,
            f"{label}: {_q(raw)} is ambiguous (decimal comma or thousands separator?); type {a}"
            f" or {b} with a decimal point and no thousands separators",
        )
    value = float(num.replace(",", "."))
    if not math.isfinite(value):
        raise QuantityError(
            "number.not_finite", label, f"{label}: {_q(raw)} is not a usable number; type an ordinary number"
        )
    return value


def _text(text: object, label: str, how: str) -> str:
    if isinstance(text, bool):
        raise QuantityError("number.bool", label, f"{label}: a yes/no value is not a number; type {how}")
    if isinstance(text, (int, float)):
        if not math.isfinite(float(text)):
            raise QuantityError(
                "number.not_finite",
                label,
                f"{label}: {_q(str(text))} is not a usable number; NaN and infinity are refused",
            )
        return repr(float(text)) if isinstance(text, float) else str(text)
    if not isinstance(text, str):
        raise QuantityError("number.invalid", label, f"{label} is not text or a number; type {how}")
    raw = text.strip()
    if not raw:
        raise QuantityError("missing", label, f"{label} is empty; type {how}")
    if raw.lower().lstrip("+-") in _NOT_FINITE:
        raise QuantityError(
            "number.not_finite", label, f"{label}: {_q(raw)} is not a usable number; NaN and infinity are refused"
        )
    return raw


def read_number(text: object, label: str, *, units: tuple[str, ...] = (), accepted: str = "") -> float:
    """A plain number as typed ("7.3", "7,3", "1e-3"), optionally followed by one of ``units``.

    Parameters
    ----------
    text : str or float
        What was typed.
    label : str
        The field or option as the person knows it, e.g. ``"--titrant-ml"``.
    units : tuple of str
        Units that may follow the number (compared without case and spaces); empty: none.
    accepted : str
        What the field takes, in words, for the messages (e.g. ``"titrant volume in mL, 0 to 100"``).

    Raises
    ------
    QuantityError
        Not a number, an ambiguous comma, a unit not in ``units``.
    """
    how = accepted or "a number such as 12.5 (a decimal comma is fine)"
    raw = _text(text, label, how)
    parts = split(raw)
    if parts is None:
        raise _not_a_number(raw, label, f"accepted: {how}")
    num, unit = parts
    if unit and unit.lower().replace(" ", "") not in {u.lower().replace(" ", "") for u in units}:
        raise QuantityError(
            "unit.invalid", label, f"{label}: {_q(raw)} has an unexpected unit {_q(unit)}; accepted: {how}"
        )
    return _number_value(num, label, raw)


def check_limit(key: str, value: float, label: str, unit: str | None = None, typed: str = "") -> float:
    """``value`` when inside ``LIMITS[key]``, else a :class:`QuantityError` (code ``<key>.out_of_range``)."""
    lo, hi, _ = LIMITS[key]
    if not (lo <= value <= hi):
        raise QuantityError(f"{key}.out_of_range", label, range_message(key, label, value, unit, typed), limit=key)
    return value


def read(kind: str, text: object, label: str, *, default_unit: str | None = None) -> Reading:
    """Reads a typed quantity and checks it against its limits.

    Parameters
    ----------
    kind : {"temp", "pressure", "conductivity", "salinity", "elevation", "do"}
        What the value is. Temperatures normalise to °C (°F and K converted), pressures to hPa,
        conductivities to µS/cm, elevations to m (ft converted); salinity is dimensionless; DO stays
        in mg/L or % as typed.
    text : str
        What was typed, e.g. ``"752 mmHg"``, ``"18,5"``, ``"92 %"``, ``"0.2 psu"``, ``"4200 ft"``.
    label : str
        The field or option as the person knows it, e.g. ``"--pressure"``, ``"Station pressure"``.
    default_unit : str, optional
        Unit of a bare number, overriding the kind's own (temperature: °C; salinity: none; elevation:
        m; pressure, conductivity and DO: a unit is required).

    Returns
    -------
    Reading

    Raises
    ------
    QuantityError
        Codes ``missing``, ``number.*``, ``unit.invalid`` or ``<limit>.out_of_range``; the message names
        ``label``, what was wrong and what is accepted.
    """
    k = kinds()[kind]
    how = f"a number with a unit, {k.units_text} (e.g. '{k.example}')"
    raw = _text(text, label, how)
    parts = split(raw)
    if parts is None:
        raise _not_a_number(raw, label, f"type {how}")
    num, unit_typed = parts
    value = _number_value(num, label, raw)
    entered = unit_typed
    if unit_typed:
        unit = k.aliases.get(unit_typed.lower().replace(" ", ""))
        if unit is None:
            raise QuantityError(
                "unit.invalid",
                label,
                f"{label}: {_q(raw)} has an unknown unit {_q(unit_typed)}; accepted units: {k.units_text}",
            )
    else:
        bare = default_unit if default_unit is not None else k.bare
        unit = k.aliases.get(bare.lower().replace(" ", "")) if bare else None
        entered = default_unit or ""
        if unit is None:
            raise QuantityError(
                "unit.invalid",
                label,
                f"{label}: {_q(raw)} has no unit; type it with one of {k.units_text} (e.g. '{k.example}')",
            )
    normal = float(k.to_normal[unit](value))
    if kind == "do":
        key, out_unit = ("do_percent", "%") if unit == "%" else ("do_mg_l", "mg/L")
    else:
        key, out_unit = kind, k.unit
    converted = unit not in ("C", "hPa", "uS/cm", "psu", "m", "mg/L", "%")
    check_limit(key, normal, label, out_unit, raw if converted else "")
    return Reading(
        kind=kind, text=raw, number=value, entered_unit=entered.strip(), value=normal, unit=out_unit, limit=key
    )
