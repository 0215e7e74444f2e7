"""A holding deadline on the Bottles screen is read on the clock the bottle was collected by, and says
which clock when the tablet is set to another zone (common practice: a time shown without its zone is
ambiguous once records travel between devices and offices)."""

from __future__ import annotations

import time
from datetime import datetime, timedelta, timezone

import pytest

from mobile.app.views import fmt_deadline

MST = timezone(timedelta(hours=-7))
COLLECTED = datetime(2026, 6, 9, 7, 40, tzinfo=MST)
DEADLINE = COLLECTED + timedelta(hours=8)  # Winkler DO: 8 h from collection (40 CFR 136.3 Table II, from memory)


@pytest.fixture
def device_zone(monkeypatch):
    def set_zone(tz: str) -> None:
        monkeypatch.setenv("TZ", tz)
        time.tzset()

    yield set_zone
    monkeypatch.undo()
    time.tzset()


def test_same_zone_as_the_tablet_shows_the_time_alone(device_zone):
    device_zone("MST7")  # a POSIX zone seven hours behind UTC, no daylight saving
    assert fmt_deadline(DEADLINE, COLLECTED, COLLECTED + timedelta(hours=1)) == "15:40"


def test_a_tablet_in_another_zone_keeps_the_collection_clock_and_names_it(device_zone):
    device_zone("UTC0")
    shown = fmt_deadline(DEADLINE, COLLECTED, COLLECTED + timedelta(hours=1))
    assert shown == "15:40 UTC−07:00"  # not 22:40, the same moment on the tablet's UTC clock


def test_another_day_names_the_weekday(device_zone):
    device_zone("MST7")
    bod_deadline = COLLECTED + timedelta(hours=48)  # BOD5: 48 h (40 CFR 136.3 Table II, from memory)
    assert fmt_deadline(bod_deadline, COLLECTED, COLLECTED + timedelta(hours=1)) == "Thu 07:40"
