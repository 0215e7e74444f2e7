"""The one thin input-check layer of the science: finite numbers in their domain, or a ValueError naming the input."""

from __future__ import annotations

import math
import re

import numpy as np

__all__ = ["InputValueError", "real", "choice", "is_plain_scalar", "range_text", "ambiguous_comma", "decimal"]


def range_text(lo: float | None, hi: float | None, unit: str, lo_open: bool = False, hi_open: bool = False) -> str:
    """Human wording of an accepted range, e.g. ``"0 to 1500 hPa"`` or ``"above 0 hPa"``."""
    u = f" {unit}" if unit else ""
    if lo is not None and hi is not None:
        left = "above " if lo_open else ""
        right = " (exclusive)" if hi_open else ""
        return f"{left}{lo:g} to {hi:g}{u}{right}"
    if lo is not None:
        return f"{'above' if lo_open else 'at least'} {lo:g}{u}"
    if hi is not None:
        return f"{'below' if hi_open else 'at most'} {hi:g}{u}"
    return f"any finite number{u}"


class InputValueError(ValueError):
    """A science input outside its domain. The message reads ``"<name> = <shown> <why>; accepted:
    <accepted>"``; the parts are kept so a shell can name the input as the person typed it."""

    def __init__(self, name: str, shown: object, why: str, accepted: str):
        super().__init__(f"{name} = {shown} {why}; accepted: {accepted}")
        self.name = name
        self.shown = str(shown)
        self.why = why
        self.accepted = accepted

    @property
    def field(self) -> str:
        """The input's own name without its place in a list (``controls[0].seed_ml`` → ``seed_ml``)."""
        return self.name.rsplit(".", 1)[-1].split("]")[-1]


def _check_scalar(v: float, name: str, lo, hi, lo_open, hi_open, unit, note) -> float:
    if not math.isfinite(v):
        raise InputValueError(name, v, "is not a finite number", range_text(lo, hi, unit, lo_open, hi_open) + note)
    if lo is not None and (v < lo or (lo_open and v == lo)):
        raise InputValueError(name, f"{v:g}", "is out of range", range_text(lo, hi, unit, lo_open, hi_open) + note)
    if hi is not None and (v > hi or (hi_open and v == hi)):
        raise InputValueError(name, f"{v:g}", "is out of range", range_text(lo, hi, unit, lo_open, hi_open) + note)
    return v


def is_plain_scalar(x: object) -> bool:
    """True for a Python float or int (not bool): the inputs that take the math-module fast path."""
    t = type(x)
    return t is float or t is int


def real(
    x,
    name: str,
    *,
    lo: float | None = None,
    hi: float | None = None,
    lo_open: bool = False,
    hi_open: bool = False,
    unit: str = "",
    note: str = "",
):
    """Checks a float or array of floats and returns it as ``float`` or a float64 ``ndarray``.

    Parameters
    ----------
    x : float, int or array_like
        The value to check.
    name : str
        The input's name as the caller knows it (``"temp_c"``), used in the message.
    lo, hi : float, optional
        Limits of the domain in which the value is possible at all (not the method's valid range:
        values outside that compute and are flagged elsewhere).
    lo_open, hi_open : bool
        Whether the limits themselves are excluded.
    unit : str
        Unit printed after the range.
    note : str
        Extra words appended to the accepted range, e.g. why the limit exists.

    Returns
    -------
    float or numpy.ndarray
        A Python float for scalar input (including 0-d arrays), else a float64 array (no copy when the
        input already is one).

    Raises
    ------
    ValueError
        Text, booleans, NaN, infinities or values outside ``lo``/``hi``; the message names ``name``,
        says what was wrong and gives the accepted range.
    """
    if type(x) is float or type(x) is int:  # fast path: most calls from the UI and the CLI
        return _check_scalar(float(x), name, lo, hi, lo_open, hi_open, unit, note)
    accepted = range_text(lo, hi, unit, lo_open, hi_open) + note
    if isinstance(x, (bool, np.bool_)):
        raise InputValueError(name, repr(x), "is a true/false value, not a number", accepted)
    if isinstance(x, (str, bytes)):
        raise InputValueError(name, repr(x), "is text, not a number", accepted)
    if x is None:
        raise InputValueError(name, "None", "is missing", accepted)
    if isinstance(x, (float, int, np.floating, np.integer)):
        return _check_scalar(float(x), name, lo, hi, lo_open, hi_open, unit, note)
    try:
        a = np.asarray(x, dtype=np.float64)
    except (TypeError, ValueError):
        raise InputValueError(name, repr(x)[:40], "is not a number or an array of numbers", accepted) from None
    if a.ndim == 0:
        return _check_scalar(float(a), name, lo, hi, lo_open, hi_open, unit, note)
    if a.size == 0:
        return a
    finite = np.isfinite(a)
    if not finite.all():
        i = int(np.flatnonzero(~finite.ravel())[0])
        raise InputValueError(f"{name}[{i}]", a.ravel()[i], "is not a finite number", accepted)
    if lo is not None:
        m = a.min()
        if m < lo or (lo_open and m == lo):
            i = int(np.argmin(a.ravel()))
            raise InputValueError(f"{name}[{i}]", f"{m:g}", "is out of range", accepted)
    if hi is not None:
        m = a.max()
        if m > hi or (hi_open and m == hi):
            i = int(np.argmax(a.ravel()))
            raise InputValueError(f"{name}[{i}]", f"{m:g}", "is out of range", accepted)
    return a


def choice(value: object, name: str, options: tuple[str, ...]) -> str:
    """Checks that ``value`` is one of ``options`` (exact, lower-case names) and returns it."""
    if isinstance(value, str):
        v = value.strip().lower()
        if v in options:
            return v
    raise ValueError(f"{name} = {value!r} is not a known choice; accepted: {', '.join(options)}")


def ambiguous_comma(number_text: str) -> bool:
    """True for a number like "1,234": 1.234 to a European eye, 1234 to an American one.

    A comma followed by exactly three digits after a non-zero whole part cannot be read safely;
    "3,5", "0,125" and "1013,25" can (the comma is the decimal separator).
    """
    head, sep, tail = number_text.strip().partition(",")
    if not sep:
        return False
    whole = head.strip().lstrip("+-")
    m = re.match(r"\d*", tail)  # always matches, perhaps the empty string
    digits = m.group(0) if m else ""
    return len(digits) == 3 and whole.isdigit() and whole.lstrip("0") != ""


def decimal(number_text: str, what: str) -> float:
    """A number typed with a decimal point or a decimal comma; an ambiguous "1,234" is refused."""
    if ambiguous_comma(number_text):
        t = number_text.strip()
        raise ValueError(
            f"{what} {t!r} is ambiguous: is it {t.replace(',', '.')} or {t.replace(',', '')}?"
            " accepted: a decimal point (or a comma followed by other than three digits),"
            " no thousands separators"
        )
    return float(number_text.strip().replace(",", "."))
