"""What the touch app's forms hold while a person types: raw text and chosen units (pure, no kivy).

The controller turns these into store records (mobile.app.records_bridge) and into derived values
through core; the screens only show them. Text is kept exactly as typed so nothing is re-rounded.
"""

from __future__ import annotations

import uuid
from dataclasses import dataclass, field
from datetime import datetime

__all__ = [
    "BottleForm",
    "StopForm",
    "CalForm",
    "TripForm",
    "BOTTLE_KINDS",
    "new_id",
    "REQUIRED_STOP_FIELDS",
    "FIELD_LABELS",
]


def new_id() -> str:
    return str(uuid.uuid4())


# (key, words on the button) — keys are ours; the bridge maps them to the record's kind.
BOTTLE_KINDS: tuple[tuple[str, str], ...] = (
    ("do_fixed", "DO fixed"),
    ("bod", "BOD"),
    ("duplicate", "Duplicate"),
    ("blank", "Blank"),
)

FIELD_LABELS = {
    "site": "Site",
    "arrived": "Arrival time",
    "temp": "Water temperature",
    "pressure": "Station pressure",
    "conductivity": "Conductivity",
    "do": "Meter DO",
    "label": "Bottle ID",
    "program": "Program",
    "crew": "Crew",
    "meter_id": "Meter ID",
    "cal_temp": "Calibration temperature",
    "cal_pressure": "Calibration pressure",
    "cal_reading": "Meter reading",
}

# Fields that must hold a value before a stop can be closed (common practice for a DO visit).
REQUIRED_STOP_FIELDS: tuple[str, ...] = ("site", "arrived", "temp", "pressure", "do")


@dataclass
class BottleForm:
    label: str
    kind: str = "do_fixed"
    collected_at: datetime | None = None
    fixed_at: datetime | None = None
    id: str = field(default_factory=new_id)


@dataclass
class StopForm:
    id: str = field(default_factory=new_id)
    site_id: str = ""
    arrived_at: datetime | None = None
    temp_text: str = ""
    temp_unit: str = "C"  # "C" | "F"
    pressure_text: str = ""
    pressure_unit: str = "hPa"
    cond_text: str = ""
    cond_unit: str = "µS/cm"
    cond_is_sc25: bool = False  # False: measured at water temperature
    do_text: str = ""
    do_unit: str = "mg/L"  # "mg/L" | "%"
    notes: str = ""
    closed: bool = False
    closed_at: datetime | None = None
    bottles: list[BottleForm] = field(default_factory=list)


@dataclass
class CalForm:
    temp_text: str = ""
    temp_unit: str = "C"
    pressure_text: str = ""
    pressure_unit: str = "hPa"
    reading_text: str = ""
    at: datetime | None = None
    id: str = field(default_factory=new_id)


@dataclass
class TripForm:
    id: str = field(default_factory=new_id)
    program: str = ""
    crew: str = ""
    meter_id: str = ""
    meter_percent_basis: str | None = None  # "local" | "sea-level" | None (the program setting)
    started_at: datetime | None = None
    ended_at: datetime | None = None
    started_without_calibration: bool = False
    pre_cal: CalForm = field(default_factory=CalForm)
    post_check: CalForm = field(default_factory=CalForm)
    stops: list[StopForm] = field(default_factory=list)

    def stop(self, stop_id: str) -> StopForm | None:
        return next((s for s in self.stops if s.id == stop_id), None)
