"""Numeric entry rules for the touch app: decimal comma accepted, refused input explained, never dropped.

Kivy's stock ``input_filter='float'`` drops characters it does not like, so "3,5" becomes 35 and
"1e-3" becomes 13 without a word. Here an insertion is either taken whole or refused whole, and a
refusal comes back as one sentence the screen shows next to the field. Pure Python: no kivy.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from core.science._validate import ambiguous_comma

__all__ = ["InsertCheck", "check_insert", "parse_decimal", "DecimalError"]

_DIGITS = set("0123456789")
_SEPARATORS = {".", ","}


class DecimalError(ValueError):
    """A number typed in a form could not be read; the message is shown as it is."""


@dataclass(frozen=True)
class InsertCheck:
    """The outcome of one insertion: the text to insert ("" when refused) and why it was refused."""

    accepted: str
    message: str = ""

    @property
    def refused(self) -> bool:
        return bool(self.message)


def _describe(ch: str) -> str:
    if ch == " ":
        return "a space"
    if ch in "eE":
        return f"“{ch}” (powers of ten)"
    return f"“{ch}”"


def check_insert(current: str, cursor: int, substring: str, *, allow_negative: bool = False,
                 label: str = "This field") -> InsertCheck:
    """Decides whether `substring` may be inserted into `current` at `cursor`.

    Accepts digits, one decimal separator (point or comma) and, when `allow_negative`, a leading
    minus. Anything else refuses the whole insertion with a message naming what was refused and
    what the field takes; nothing is silently dropped.
    """
    if substring in ("\n", "\r", "\t"):
        return InsertCheck(accepted="")
    cursor = max(0, min(cursor, len(current)))
    candidate = current[:cursor] + substring + current[cursor:]
    takes = "digits and one decimal point or comma" + (", with a leading minus" if allow_negative else "")
    for i, ch in enumerate(candidate):
        if ch in _DIGITS or ch in _SEPARATORS:
            continue
        if ch == "-" and allow_negative and i == 0:
            continue
        if ch == "-" and allow_negative:
            return InsertCheck("", f"{label}: a minus sign only goes first; it takes {takes}.")
        if ch == "-":
            return InsertCheck("", f"{label}: “-” is not taken here, values are not negative; it takes {takes}.")
        return InsertCheck("", f"{label}: {_describe(ch)} is not taken; it takes {takes}.")
    if sum(candidate.count(s) for s in _SEPARATORS) > 1:
        return InsertCheck("", f"{label}: only one decimal point or comma is taken (no thousands separators).")
    return InsertCheck(accepted=substring)


def parse_decimal(text: str, *, label: str = "Value") -> float | None:
    """Reads a number typed in a form; decimal comma or point; "" -> None.

    Raises DecimalError with one sentence for anything else (two separators, exponents, words).
    """
    s = (text or "").strip()
    if not s:
        return None
    if sum(s.count(c) for c in _SEPARATORS) > 1:
        raise DecimalError(f"{label} “{s}” has more than one decimal point or comma; type one, e.g. 3,5 or 3.5.")
    body = s[1:] if s.startswith("-") else s
    if not body or any(ch not in _DIGITS and ch not in _SEPARATORS for ch in body):
        raise DecimalError(f"{label} “{s}” is not a number; type digits with one decimal point or comma.")
    if body in _SEPARATORS:
        raise DecimalError(f"{label} “{s}” has no digits; type a number such as 12,4.")
    if ambiguous_comma(s):  # the same rule as core's parsers and the store's validation
        raise DecimalError(f"{label} “{s}” could be {s.replace(',', '.')} or {s.replace(',', '')}; "
                           "type it with a decimal point.")
    value = float(s.replace(",", "."))
    if not math.isfinite(value):  # cannot happen with digits only, kept as a guard
        raise DecimalError(f"{label} “{s}” is not a finite number.")
    return value
