"""What the app's screens show, already as text: view models and the formatting of times and values (no kivy)."""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime, timezone
from typing import Any

from core.records.messages import offset_text
from core.rules.report import WADING_CAUTION
from core.science.winkler import SAFETY_NOTE
from mobile.app.theme import severity_mark

__all__ = [
    "StopView",
    "FlagLine",
    "CalView",
    "Refusal",
    "ClockLine",
    "TripLine",
    "flag_line",
    "error_line",
    "entry_action",
    "fmt_value",
    "target_doubt",
    "target_caption",
    "reading_flagged",
    "fmt_when",
    "parse_when",
    "fmt_duration",
    "fmt_deadline",
    "fmt_clock",
    "zone_label",
    "local_now",
    "WADING_CAUTION",
    "REAGENT_CAUTION",
]

REAGENT_CAUTION = SAFETY_NOTE  # the one reagent caution (core.science.winkler)
# WADING_CAUTION: the one wading caution (core.rules.report), shown on screen and printed in reports


def local_now() -> datetime:
    return datetime.now(timezone.utc).astimezone()


def fmt_deadline(deadline: datetime, clock_of: datetime, now: datetime) -> str:
    """A holding deadline on the clock the bottle was collected by (`clock_of`'s UTC offset): "08:00"
    on the same day as `now` there, "Thu 08:00" on another, with that clock's offset added when the
    tablet's own differs (a tablet set to another zone must not move the deadline)."""
    dl = deadline.astimezone(clock_of.tzinfo) if clock_of.tzinfo is not None else deadline.astimezone()
    text = dl.strftime("%H:%M") if dl.date() == now.astimezone(dl.tzinfo).date() else dl.strftime("%a %H:%M")
    if dl.utcoffset() != now.astimezone().utcoffset():
        text += f" {offset_text(dl)}"
    return text


def fmt_clock(when: datetime, now: datetime) -> str:
    """A time of day on a row ("08:23"), with its UTC offset added when this tablet's clock is set to
    another offset (a fixing time read as the tablet's own hour would be off by the difference)."""
    text = when.strftime("%H:%M")
    if when.utcoffset() != now.astimezone().utcoffset():
        text += f" {offset_text(when)}"
    return text


def zone_label(when: datetime | None, now: datetime) -> str:
    """Which clock a form's time field is in: "UTC−07:00", and "(this tablet: UTC)" after it when the
    tablet's own offset differs; the tablet's offset when no time is there yet."""
    if when is None or when.utcoffset() is None:
        return offset_text(now.astimezone())
    text = offset_text(when)
    if when.utcoffset() != now.astimezone().utcoffset():
        text += f"; this tablet is on {offset_text(now.astimezone())}"
    return text


@dataclass
class FlagLine:
    """A flag as the screen shows it: symbol and word for the severity, message, action."""

    code: str
    severity: str
    symbol: str
    word: str
    message: str
    action: str

    @property
    def text(self) -> str:
        tail = f" — {self.action}" if self.action else ""
        return f"{self.symbol} {self.word}: {self.message}{tail}"


def flag_line(flag: Any) -> FlagLine:
    sev = getattr(flag.severity, "value", flag.severity)
    symbol, word = severity_mark(sev)
    return FlagLine(flag.code, str(sev), symbol, word, flag.message, flag.action or "")


def error_line(message: str, field_name: str = "", action: str = "") -> FlagLine:
    symbol, _word = severity_mark("stop-and-check")
    return FlagLine(f"input.{field_name or 'value'}", "stop-and-check", symbol, "CHECK ENTRY", message, action)


def entry_action(field_name: str, unit: str) -> str:
    """What to type (or tap) after a stop entry was refused, with the unit the form has chosen for it."""
    if field_name == "temp":
        return (
            "type it in °C, or tap °F if the thermometer shows °F"
            if unit != "F"
            else "type it in °F, or tap °C if the thermometer shows °C"
        )
    if field_name == "pressure":
        return f"type the barometer's station reading in {unit}, or pick the unit it shows from the list beside it"
    if field_name == "conductivity":
        return f"type it in {unit}, or pick the unit the meter shows from the list beside it"
    if field_name == "do":
        return (
            "type the meter's mg/L, or tap % sat if the meter shows % saturation"
            if unit != "%"
            else "type the meter's % saturation, or tap mg/L if the meter shows mg/L"
        )
    return ""


@dataclass
class StopView:
    """Everything the stop screen shows beside the form, already as text."""

    sat_text: str = "—"
    percent_text: str = "—"
    do_text: str = "—"
    salinity_text: str = "—"
    flags: list[FlagLine] = field(default_factory=list)
    errors: dict[str, str] = field(default_factory=dict)
    assessment: Any = None
    #: Which typed value the saturation target rests on is in doubt (a warning or worse on it), in
    #: words for the target tile ("pressure"); "" when none is.
    target_doubt: str = ""
    #: A warning or worse is about the DO reading itself (low, hypoxic, supersaturated).
    reading_flagged: bool = False


#: What the saturation target is computed from, by the first part of a flag's code or field, in words.
TARGET_INPUTS = {"pressure": "pressure", "temp": "temperature", "conductivity": "conductivity", "salinity": "salinity"}


def reading_flagged(flags: list[Any]) -> bool:
    """True when a warning or worse is about the DO reading itself (a `do.` code)."""
    return any(str(getattr(f.severity, "value", f.severity)) != "note" and f.code.startswith("do.") for f in flags)


def target_doubt(flags: list[Any]) -> str:
    """The inputs of the saturation target that a warning or worse is about, in words ("pressure")."""
    words: list[str] = []
    for f in flags:
        if str(getattr(f.severity, "value", f.severity)) == "note":
            continue
        head = (getattr(f, "field", None) or f.code).split(".")[0].split("_")[0]
        word = TARGET_INPUTS.get(head)
        if word and word not in words:
            words.append(word)
    return " and ".join(words)


def target_caption(doubt: str) -> str:
    """The target tile's caption: what it is, or which of its inputs to check first (short enough for
    the tile's one line)."""
    if not doubt:
        return "Saturation target (100 %)"
    n = doubt.count(" and ") + 1
    return f"▲ Check the {doubt} first" if n == 1 else f"▲ Check {n} of its inputs first"


@dataclass
class Refusal:
    """Why an action was refused: one sentence, and where the screen shows it ("form",
    "calibration": on the calibration panel, "no calibration": with the start-without button)."""

    message: str
    where: str = "form"


@dataclass
class CalView:
    target_text: str = "—"
    verdict: str = ""  # "PASS" | "FAIL" | ""
    detail: str = ""
    result: Any = None


@dataclass
class ClockLine:
    stop_id: str
    label: str
    kind: str
    where: str
    remaining_s: float
    expired: bool
    text: str
    symbol: str
    word: str


@dataclass
class TripLine:
    id: str
    title: str
    status: str  # words: "open", "ended", "synced", "needs attention"
    detail: str


def fmt_value(value: float | None, digits: int, unit: str = "") -> str:
    if value is None:
        return "—"
    return f"{value:.{digits}f}" + (f" {unit}" if unit else "")


def parse_when(text: str, base: datetime | None) -> datetime:
    """Reads "HH:MM" (same day as `base`) or "YYYY-MM-DD HH:MM" in `base`'s offset (else this device's)."""
    s = (text or "").strip()
    tz = (base or local_now()).tzinfo or local_now().tzinfo
    for fmt in ("%Y-%m-%d %H:%M", "%Y-%m-%dT%H:%M", "%Y-%m-%d %H:%M:%S"):
        try:
            return datetime.strptime(s, fmt).replace(tzinfo=tz)
        except ValueError:
            pass
    try:
        t = datetime.strptime(s, "%H:%M")
    except ValueError:
        raise ValueError(f"Time “{s}” is not readable; type HH:MM (24 h) or YYYY-MM-DD HH:MM.") from None
    day = (base or local_now()).astimezone(tz)
    return day.replace(hour=t.hour, minute=t.minute, second=0, microsecond=0)


def fmt_when(when: datetime | None) -> str:
    """A time as the forms show it, in its own offset (the clock where it was recorded)."""
    if when is None:
        return ""
    return when.strftime("%Y-%m-%d %H:%M")


def fmt_duration(seconds: float) -> str:
    s = int(abs(seconds))
    d, rem = divmod(s, 86400)
    h, rem = divmod(rem, 3600)
    m = rem // 60
    if d:
        return f"{d} d {h} h"
    if h:
        return f"{h} h {m:02d} min"
    return f"{m} min"
