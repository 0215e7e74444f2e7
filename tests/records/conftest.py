"""Fixtures for the records tests: a real device store in a temporary folder, and record builders."""

from __future__ import annotations

from datetime import datetime, timedelta, timezone

import pytest

from core.records.models import Bottle, Calibration, Site, Stop, Trip, measure
from core.store import DeviceStore

T0 = datetime(2026, 6, 14, 9, 0, tzinfo=timezone(timedelta(hours=-7)))


class FakeClock:
    """A settable clock for the store (times of audit entries)."""

    def __init__(self, start: datetime = T0):
        self.now = start

    def __call__(self) -> datetime:
        self.now = self.now + timedelta(seconds=1)
        return self.now


@pytest.fixture
def store(tmp_path):
    s = DeviceStore.open(tmp_path / "data", device_id="dev-test-a", clock=FakeClock())
    s.save_sites(
        [
            Site(id="LK-01", name="Mill Ford", elevation_m=212.0, water_class="warm"),
            Site(id="LK-03", name="Alder Gauge", elevation_m=395.0, water_class="cold"),
            Site(id="LK-05", name="Tamsin Falls Pool", elevation_m=1500.0, water_class="cold"),
        ]
    )
    return s


def make_stop(
    site="LK-01", at=T0, temp="18.5", pressure="1013.25 hPa", cond="300 uS/cm", do="8.4", bottles=(), closed=False, **kw
) -> Stop:
    return Stop(
        site_id=site,
        arrived_at=at,
        temp=measure("temp", temp) if temp else None,
        pressure=measure("pressure", pressure) if pressure else None,
        conductivity=measure("conductivity", cond) if cond else None,
        do=measure("do", do, default_unit="mg/L") if do else None,
        bottles=list(bottles),
        closed_at=(at + timedelta(minutes=20)) if closed else None,
        **kw,
    )


def make_bottle(label="TV-0001", kind="bod", at=T0, fixed=None, **kw) -> Bottle:
    return Bottle(label=label, kind=kind, collected_at=at, fixed_at=fixed, **kw)


def make_cal(reading=9.09, temp="20.0", pressure="1013.25 hPa", kind="pre-trip", at=T0) -> Calibration:
    return Calibration(
        kind=kind, at=at, temp=measure("temp", temp), pressure=measure("pressure", pressure), reading_mg_l=reading
    )


def make_trip(stops=(), **kw) -> Trip:
    kw.setdefault("program", "Tamsin Valley Stream Watch")
    kw.setdefault("crew", ["R.O.", "J.V."])
    return Trip(started_at=T0 - timedelta(hours=1), stops=list(stops), **kw)
