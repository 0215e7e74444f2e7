"""What needs watching on the open trip: every bottle's holding clock and the End screen's attention lines (no kivy).

Functions of the app's controller (mobile.app.controller.AppController), which forwards to them. The
clocks are core's one holding rule (core.rules.lab.bottle_clock, read by `lab pending` and QC too).
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

from mobile.app import review_steps
from mobile.app.forms import BOTTLE_KINDS
from mobile.app.theme import severity_mark
from mobile.app.views import ClockLine, fmt_deadline, fmt_duration

__all__ = ["clock_lines", "attention_lines"]


def clock_lines(ctl: Any, now: datetime | None = None) -> list[ClockLine]:
    """Every bottle's holding-time clock in the open trip, most urgent first.

    A blank runs none and is left out; a bottle with a valid result is listed as ANALYSED, never as
    expired."""
    from core.rules.lab import bottle_clock

    now = now or ctl.now()
    out: list[ClockLine] = []
    if ctl.trip is None:
        return out
    overrides = dict(ctl.settings().holding_overrides_h or {}) or None
    for s in ctl.trip.stops:
        site = ctl.site(s.site_id) if s.site_id else None
        where = f"stop {ctl.stop_number(s)}" + (f" · {ctl.bridge.site_title(site)}" if site else "")
        bottles = ctl.bridge.bottle_records(s, ctl._saved_stop_doc(s.id))
        for b in bottles:
            kind_word = dict(BOTTLE_KINDS)[ctl.bridge.RECORD_TO_KIND[b.kind]]
            clock = bottle_clock(b, now, stop_bottles=bottles, overrides=overrides)
            if clock is None:
                if b.kind != "blank" and b.collected_at <= now:  # a valid result: no clock runs
                    out.append(
                        ClockLine(
                            s.id, b.label, kind_word, where, float("inf"), False, "result recorded", "○", "ANALYSED"
                        )
                    )
                continue
            deadline = fmt_deadline(clock.deadline, b.collected_at, now)
            if clock.expired:
                symbol, word = severity_mark("stop-and-check")
                word = "EXPIRED"
                text = f"deadline {deadline} passed {fmt_duration(clock.remaining_s)} ago"
            elif clock.flag is not None:
                symbol, word = severity_mark("warning")
                word = "SOON"
                text = f"{fmt_duration(clock.remaining_s)} left · deadline {deadline}"
            else:
                symbol, word = "○", "OK"
                text = f"{fmt_duration(clock.remaining_s)} left · deadline {deadline}"
            if clock.kind == "do_winkler" and b.fixed_at is None:
                text += " · NOT FIXED YET"
            out.append(ClockLine(s.id, b.label, kind_word, where, clock.remaining_s, clock.expired, text, symbol, word))
    out.sort(key=lambda c: c.remaining_s)
    return out


def attention_lines(ctl: Any) -> list[str]:
    """What needs attention before or after ending the trip, as lines with symbol and word."""
    out: list[str] = []
    if ctl.trip is None:
        return out
    for s in ctl.trip.stops:
        n = ctl.stop_number(s)
        site = ctl.site(s.site_id) if s.site_id else None
        where = f"Stop {n}" + (f" ({ctl.bridge.site_title(site)})" if site else "")
        if not s.closed:
            msg = ctl.close_problem(s)
            if msg:
                sym, word = severity_mark("stop-and-check")
                out.append(f"{sym} {word}: {where}: {msg}")
        for f in ctl.stop_view(s).flags:
            if f.severity != "note":
                out.append(f"{f.symbol} {f.word}: {where}: {f.message}" + (f" — {f.action}" if f.action else ""))
    for c in ctl.clock_lines():
        if c.word in ("EXPIRED", "SOON"):
            out.append(f"{c.symbol} {c.word}: bottle {c.label} ({c.where}): {c.text}")
    out.extend(review_steps.conflict_lines(ctl))
    pre = ctl.cal_view(ctl.trip.pre_cal)
    if pre.verdict == "FAIL":
        sym, word = severity_mark("stop-and-check")
        out.append(f"{sym} {word}: pre-trip calibration failed: {pre.detail}")
    elif ctl.trip.started_without_calibration:
        sym, word = severity_mark("warning")
        out.append(f"{sym} {word}: this trip was started without a pre-trip calibration (recorded when it started).")
    elif not pre.verdict and ctl.trip.stops:
        sym, word = severity_mark("warning")
        out.append(f"{sym} {word}: no pre-trip calibration recorded for this trip.")
    post = ctl.cal_view(ctl.trip.post_check, post=True)
    if post.verdict == "FAIL":
        sym, word = severity_mark("stop-and-check")
        out.append(f"{sym} {word}: post-trip check failed: {post.detail}")
    elif ctl.cal_problem(ctl.trip.post_check, "post-trip"):
        sym, word = severity_mark("stop-and-check")
        out.append(f"{sym} {word}: post-trip check: {ctl.cal_problem(ctl.trip.post_check, 'post-trip')}")
    elif not post.verdict:
        sym, word = severity_mark("note")
        out.append(f"{sym} {word}: post-trip calibration check not entered yet.")
    return out
