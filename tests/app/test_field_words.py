"""What the stop screen says beside its values, without a window: which clock a time is in, what to type
after a refused entry, and which input of the saturation target a warning is about."""

from __future__ import annotations

from datetime import datetime, timedelta, timezone

from core.flags import Flag, Severity
from mobile.app.views import entry_action, fmt_clock, reading_flagged, target_caption, target_doubt, zone_label

MINUS7 = timezone(timedelta(hours=-7))


def test_a_time_in_another_offset_says_both_clocks():
    # common practice: a time read on a tablet set to another zone names its own offset
    arrived = datetime(2026, 6, 9, 7, 40, tzinfo=MINUS7)
    now_utc = datetime(2026, 6, 9, 15, 0, tzinfo=timezone.utc)
    label = zone_label(arrived, now_utc)
    assert label.startswith("UTC−07:00") and "this tablet is on" in label
    assert fmt_clock(arrived, now_utc).endswith("UTC−07:00")


def test_a_time_on_the_tablets_own_clock_stays_short():
    now = datetime.now(timezone.utc).astimezone()
    assert "this tablet" not in zone_label(now, now)
    assert fmt_clock(now, now) == now.strftime("%H:%M")
    assert zone_label(None, now)  # a new stop: the tablet's own offset


def test_refused_entries_say_what_to_type_in_the_chosen_unit():
    # common practice: a refusal names what to type or tap next
    assert "tap °F" in entry_action("temp", "C")
    assert "tap °C" in entry_action("temp", "F")
    assert "in mmHg" in entry_action("pressure", "mmHg")
    assert "tap % sat" in entry_action("do", "mg/L")
    assert entry_action("notes", "") == ""


def test_only_warnings_on_the_targets_inputs_mark_the_target():
    def flag(code, sev, field=None):
        return Flag(code=code, severity=sev, message="m", action="", field=field)

    assert target_doubt([flag("pressure.sea_level_adjusted", Severity.WARNING, "pressure_hpa")]) == "pressure"
    assert target_doubt([flag("temp_c.out_of_range", Severity.STOP, "temp_c")]) == "temperature"
    assert target_doubt([flag("pressure.flat", Severity.NOTE)]) == ""  # a note does not doubt the value
    assert target_doubt([flag("do.supersaturated", Severity.WARNING)]) == ""  # about the reading, not the target


def test_the_target_caption_fits_one_line_and_the_reading_flag_is_about_do():
    assert target_caption("") == "Saturation target (100 %)"
    assert target_caption("pressure") == "▲ Check the pressure first"
    assert target_caption("pressure and conductivity") == "▲ Check 2 of its inputs first"
    low = Flag(code="do.below_criterion", severity=Severity.WARNING, message="m")
    basis = Flag(code="do.percent_basis_sea_level", severity=Severity.NOTE, message="m")
    assert reading_flagged([low]) and not reading_flagged([basis])
