"""Numeric entry rules for the touch app: decimal comma accepted, refused input explained, never dropped.

Kivy's stock ``input_filter='float'`` drops characters it does not like, so "3,5" becomes 35 and
"1e-3" becomes 13 without a word. Here an insertion is either taken whole or refused whole, and a
refusal comes back as one sentence the screen shows next to the field. Pure Python: no kivy.
"""

from __future__ import annotations

from dataclasses import dataclass

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


def check_insert(
    current: str, cursor: int, substring: str, *, allow_negative: bool = False, label: str = "This field"
) -> InsertCheck:
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

    The grammar is core's (core.science.quantities.read_number, the decimal-comma rule included);
    touch entry takes no powers of ten. Raises DecimalError with one sentence for anything else.
    """
    from core.science.quantities import QuantityError, read_number

    s = (text or "").strip()
    if not s:
        return None
    if "e" in s.lower() and any(ch in _DIGITS for ch in s):
        raise DecimalError(f"{label} “{s}” has a power of ten; type the plain number, e.g. 0,001.")
    try:
        return read_number(s, label)
    except QuantityError as exc:
        raise DecimalError(exc.message) from None
