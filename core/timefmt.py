"""How a time is shown to a person, everywhere (app, command line, reports, messages from the science):
in the time's own UTC offset, saying which. Pure: no clock, no store."""

from __future__ import annotations

from datetime import datetime

__all__ = ["when_text", "offset_text"]


def when_text(when: datetime | str | None) -> str:
    """A record's time as a person reads it: in the time's own UTC offset, saying which, e.g.
    ``2026-06-09 07:40 UTC−07:00`` (the clock the crew saw where it was recorded, on any machine).

    The app and the command line both show times this way. A time without an offset (not written
    by streamtab) is shown as it is, marked "offset unknown".
    """
    if when is None or when == "":
        return "—"
    if isinstance(when, str):
        try:
            when = datetime.fromisoformat(when)
        except ValueError:
            return str(when)
    text = when.strftime("%Y-%m-%d %H:%M")
    if when.utcoffset() is None:
        return f"{text} (offset unknown)"
    return f"{text} {offset_text(when)}"


def offset_text(when: datetime) -> str:
    """The UTC offset of an aware time as people write it: ``UTC``, ``UTC−07:00``, ``UTC+05:30``."""
    offset = when.utcoffset()
    if offset is None:
        return "offset unknown"
    minutes = int(offset.total_seconds() // 60)
    if minutes == 0:
        return "UTC"
    sign = "+" if minutes > 0 else "−"
    h, m = divmod(abs(minutes), 60)
    return f"UTC{sign}{h:02d}:{m:02d}"
