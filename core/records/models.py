"""Trip records: sites, trips, stops, bottles, calibrations, lab results, audit and conflicts (pydantic v2)."""

from __future__ import annotations

import json
import types
import typing
import uuid
from dataclasses import dataclass, field
from functools import cache
from pathlib import Path
from typing import Any, Literal

from pydantic import (
    AwareDatetime,
    BaseModel,
    ConfigDict,
    Field,
    ValidationInfo,
    field_validator,
    model_serializer,
    model_validator,
)
from pydantic_core import PydanticCustomError

from core.science import quantities as _quantities
from core.science.conductivity import ALPHA_RANGE_PER_C

__all__ = [
    "SCHEMA_VERSION",
    "BOTTLE_KINDS",
    "WATER_CLASSES",
    "LIMITS",
    "Quantity",
    "FlagRecord",
    "Derived",
    "Site",
    "SiteSnapshot",
    "Calibration",
    "LabResult",
    "Bottle",
    "Stop",
    "RESULT_STATUSES",
    "LOCAL_STOP_KEYS",
    "AuditEntry",
    "AuditChange",
    "AUDIT_VALUE_BYTES",
    "ConflictSide",
    "Conflict",
    "ReviewEvent",
    "ProgramSettings",
    "Signature",
    "CustodyRecord",
    "LabBatch",
    "Trip",
    "SIGNATURE_LIMITS",
    "InputError",
    "analyte_key",
    "new_id",
    "parse_number",
    "measure",
    "trip_json_schema",
    "write_trip_schema",
    "INPUT",
    "DERIVED",
    "BOOKKEEPING",
    "LOG",
    "ROLES",
    "RETAINED",
    "RoleNode",
    "role_tree",
    "paths_by_role",
    "keys_by_role",
]

#: Version of the trip document layout this build writes. core.records.migrations lifts older ones.
SCHEMA_VERSION = 3

BOTTLE_KINDS = ("do-fixed", "bod", "duplicate", "blank")
WATER_CLASSES = ("warm", "cold")

#: Hard limits of what a form accepts, per field kind (value in the normalised unit): the one table
#: in core.science.quantities, which the command line and the app read too.
LIMITS = _quantities.LIMITS


def new_id() -> str:
    """A fresh UUID (version 4) as text; every list element in a trip has one so sync merges by id."""
    return str(uuid.uuid4())


class InputError(ValueError):
    """A value a person typed that cannot be accepted: stable `code`, the `field` and a readable message."""

    def __init__(self, code: str, field: str, message: str):
        super().__init__(message)
        self.code = code
        self.field = field
        self.message = message


# --------------------------------------------------------------------------------------------
# Strict number parsing for form input (the grammar is core.science.quantities)
# --------------------------------------------------------------------------------------------
def _input_error(exc: _quantities.QuantityError, field: str) -> InputError:
    return InputError(exc.code, field, exc.message)


def parse_number(text: str, field: str = "value", *, limit: str | None = None, units: tuple[str, ...] = ()) -> float:
    """Reads a number a person typed: "3.5" and "3,5" give 3.5; never reads "3,5" as 35.

    Refuses NaN, infinity, yes/no values, thousands separators and an ambiguous "1,234"
    (a decimal comma or a thousands comma?) with an :class:`InputError` naming the field; with
    `limit` (a key of :data:`LIMITS`), also a value outside that limit. `units` may follow the
    number ("120 %" in a column of percentages); any other unit is refused.
    """
    from core.records.messages import label_for

    label = label_for(field)
    how = f"a number within {_quantities.range_text(limit)}" if limit is not None else ""
    try:
        value = _quantities.read_number(text, label, units=units, accepted=how)
        if limit is not None:
            _quantities.check_limit(limit, value, label)
        return value
    except _quantities.QuantityError as exc:
        raise _input_error(exc, field) from None


# --------------------------------------------------------------------------------------------
# Field roles: declared once on each field, read by the store's diff, derive, merge and sync
# --------------------------------------------------------------------------------------------
#: Entered by a person (or brought in with a record): what a save, a diff, a merge and a
#: conflict are about. A field with no declared role is input.
INPUT = "input"
#: Computed from the inputs at save time (core.rules.qc.derive); never typed, never a conflict,
#: never an audited change — it follows from the inputs.
DERIVED = "derived"
#: Kept by the store about the record itself (id, revision, time of the last save, device,
#: schema version): not content.
BOOKKEEPING = "bookkeeping"
#: A grow-only log (the audit trail): merged as a union by id, never a content change by itself.
LOG = "log"
ROLES = (INPUT, DERIVED, BOOKKEEPING, LOG)


def _role(role: str, *, retain: bool = False) -> dict[str, Any]:
    """The `json_schema_extra` of a field with that role (shows as ``"role"`` in the JSON Schema).

    `retain`: what the field holds is never removed by an import or a merge (lab results,
    calibrations, custody records): an element or value the stored trip has and the incoming
    version lacks is kept.
    """
    if role not in ROLES:  # pragma: no cover - a programming mistake
        raise ValueError(f"role {role!r} is not one of {ROLES}")
    return {"role": role, "retain": True} if retain else {"role": role}


#: The `json_schema_extra` of an input field whose content is never removed (see :func:`_role`).
RETAINED = _role(INPUT, retain=True)


# --------------------------------------------------------------------------------------------
# Base model
# --------------------------------------------------------------------------------------------
class _Record(BaseModel):
    """Strict (no "nan", "inf" or True as numbers; times must carry a zone); unknown fields kept."""

    model_config = ConfigDict(
        strict=True,
        allow_inf_nan=False,
        extra="allow",
        populate_by_name=True,
        validate_default=False,
        ser_json_inf_nan="strings",
    )


def _id_field() -> Any:
    return Field(default_factory=new_id, min_length=1, max_length=64)


class Quantity(_Record):
    """A typed value kept exactly as typed, beside its normalised value.

    ``text`` is what the person typed ("752 mmHg"); ``entered_value``/``entered_unit`` are its
    number and unit as read; ``value``/``unit`` are normalised (°C, hPa, µS/cm, mg/L or %).
    """

    text: str = Field(max_length=80)
    entered_value: float
    entered_unit: str = Field(max_length=20)
    value: float
    unit: str = Field(max_length=10)


class FlagRecord(_Record):
    """A stored :class:`core.flags.Flag`."""

    code: str
    severity: Literal["note", "warning", "stop-and-check"]
    message: str
    action: str = ""
    field: str | None = None

    @classmethod
    def from_flag(cls, flag: Any) -> FlagRecord:
        sev = getattr(flag.severity, "value", flag.severity)
        return cls(code=flag.code, severity=sev, message=flag.message, action=flag.action or "", field=flag.field)

    def to_flag(self):
        from core.flags import Flag, Severity

        return Flag(self.code, Severity(self.severity), self.message, self.action, self.field)


class Derived(_Record):
    """Values computed from a stop's inputs at save time, with the method and core version."""

    do_sat_mg_l: float
    percent_saturation: float | None = None
    do_mg_l: float | None = None
    salinity: float
    salinity_source: str
    specific_conductance_us_cm: float | None = None
    pressure_hpa: float
    temp_c: float
    method: str
    core_version: str
    flags: list[FlagRecord] = Field(default_factory=list)
    #: Fingerprint of what the values were derived with (site, settings, core version); the
    #: store reuses them for an unchanged stop while the basis is the same.
    basis: str | None = None


def _range_error(kind: str, label_field: str, value: float, unit: str) -> PydanticCustomError:
    low, high, _ = _quantities.LIMITS[kind]
    return PydanticCustomError(
        f"{kind}.out_of_range",
        "{value} outside {low}–{high} {unit}",
        {"value": value, "low": low, "high": high, "unit": unit, "kind": kind},
    )


def _check_quantity(q: Quantity | None, kind: str, units: tuple[str, ...]) -> Quantity | None:
    if q is None:
        return None
    if q.unit not in units:
        raise PydanticCustomError(
            "unit.mismatch", "unit {unit} not in {expected}", {"unit": q.unit, "expected": ", ".join(units)}
        )
    key = kind
    if kind == "do":
        key = "do_percent" if q.unit == "%" else "do_mg_l"
    low, high, _unit = LIMITS[key]
    if not (low <= q.value <= high):
        raise _range_error(key, kind, q.value, q.unit)
    return q


def _check_range(value: float | None, kind: str) -> float | None:
    if value is None:
        return None
    low, high, unit = LIMITS[kind]
    if not (low <= value <= high):
        raise _range_error(kind, kind, value, unit)
    return value


#: The units a stored Quantity of each kind may carry (the normalised units).
_QUANTITY_UNITS: dict[str, tuple[str, ...]] = {
    "temp": ("°C",),
    "pressure": ("hPa",),
    "conductivity": ("µS/cm",),
    "do": ("mg/L", "%"),
}


def _ranged(**fields: str) -> Any:
    """One validator for a model's plain numbers: field name → its kind in the table of limits."""

    def check(cls: type, v: float | None, info: ValidationInfo) -> float | None:
        return _check_range(v, fields[str(info.field_name)])

    return field_validator(*fields)(classmethod(check))


def _measured(*names: str) -> Any:
    """One validator for a model's quantities; each field is named after its kind (temp, pressure, ...)."""

    def check(cls: type, v: Quantity | None, info: ValidationInfo) -> Quantity | None:
        kind = str(info.field_name)
        return _check_quantity(v, kind, _QUANTITY_UNITS[kind])

    return field_validator(*names)(classmethod(check))


def _not_blank(*names: str) -> Any:
    """One validator for text fields that must say something (kept stripped)."""

    def check(cls: type, v: str) -> str:
        if not v.strip():
            raise PydanticCustomError("text.blank", "blank")
        return v.strip()

    return field_validator(*names)(classmethod(check))


class Site(_Record):
    """A sampling site: code, name, elevation (m), optional coordinates, water class and criteria."""

    schema_version: int = SCHEMA_VERSION
    id: str = Field(min_length=1, max_length=32)
    name: str = Field(min_length=1, max_length=120)
    elevation_m: float
    latitude: float | None = None
    longitude: float | None = None
    water_class: Literal["warm", "cold"] | None = None
    #: Site-specific DO criterion (mg/L), overriding the program's warm/cold default.
    min_do_mg_l: float | None = None
    #: Site-specific supersaturation threshold (%), overriding the program's default.
    supersaturation_percent: float | None = None
    notes: str = Field(default="", max_length=2000)
    #: When the site's entry last changed (set by the store); sync keeps the newest entry per id.
    updated_at: AwareDatetime | None = None

    _ranges = _ranged(
        elevation_m="elevation",
        latitude="latitude",
        longitude="longitude",
        min_do_mg_l="criterion",
        supersaturation_percent="supersaturation",
    )


class Calibration(_Record):
    """A meter air calibration (pre-trip) or check (post-trip): inputs, and the derived verdict."""

    id: str = _id_field()
    kind: Literal["pre-trip", "post-trip"] = "pre-trip"
    at: AwareDatetime
    temp: Quantity
    pressure: Quantity
    reading_mg_l: float
    #: ± mg/L; None uses the program setting (default 0.2, common practice; USGS NFM A6.2 method).
    tolerance_mg_l: float | None = None
    notes: str = Field(default="", max_length=2000)
    # derived at save time
    target_mg_l: float | None = Field(None, json_schema_extra=_role(DERIVED))
    difference_mg_l: float | None = Field(None, json_schema_extra=_role(DERIVED))
    accepted: bool | None = Field(None, json_schema_extra=_role(DERIVED))
    method: str | None = Field(None, json_schema_extra=_role(DERIVED))
    core_version: str | None = Field(None, json_schema_extra=_role(DERIVED))
    flags: list[FlagRecord] = Field(default_factory=list, json_schema_extra=_role(DERIVED))

    _quantities = _measured("temp", "pressure")
    _ranges = _ranged(reading_mg_l="calibration_reading", tolerance_mg_l="tolerance")


def analyte_key(analyte: str) -> str:
    """The analyte name compared case- and separator-blind ("do-winkler" == "DO_Winkler")."""
    return str(analyte).strip().lower().replace("-", "_").replace(" ", "_")


#: Keys of a stop that a device keeps for itself (the app's text of a refused entry, a draft):
#: the store keeps them in its local drafts, never in the trip file, so they never sync.
LOCAL_STOP_KEYS = frozenset({"draft_text"})


#: The states of a lab result: live and acceptable, live and failing its checks, or replaced by a
#: later result of the same analysis on the same bottle (kept, never deleted).
RESULT_STATUSES = ("valid", "invalid", "superseded")


class LabResult(_Record):
    """A laboratory result for a bottle (Winkler DO, BOD5, specific conductance, ...).

    ``status`` says whether the result counts: "valid", "invalid" (a stop-and-check finding or
    no valid dilution; ``valid`` is then False) or "superseded" (a re-analysis replaced it:
    ``superseded_by`` names the later result, which lists this one in ``supersedes``). ``flags``
    are the bench's findings. ``inputs`` keeps what the analyst entered, the numbers used and the
    intermediate values (see core.rules.lab).
    """

    id: str = _id_field()
    analyte: str = Field(min_length=1, max_length=40)
    value: float | None = None
    unit: str = Field(default="", max_length=20)
    analysed_at: AwareDatetime | None = None
    analyst: str = Field(default="", max_length=40)
    method: str = Field(default="", max_length=80)
    inputs: dict[str, Any] = Field(default_factory=dict)
    #: Whether the measurement passed its checks (None: not checked); see ``status``.
    valid: bool | None = None
    status: Literal["valid", "invalid", "superseded"] = "valid"
    #: Ids of the earlier results of the same analysis this one replaces (a re-analysis).
    supersedes: list[str] = Field(default_factory=list)
    #: On a replaced result: the result that replaced it, when, and the analyst's reason.
    superseded_by: str | None = Field(default=None, max_length=64)
    superseded_at: AwareDatetime | None = None
    superseded_reason: str = Field(default="", max_length=400)
    flags: list[FlagRecord] = Field(default_factory=list)
    notes: str = Field(default="", max_length=2000)

    @model_validator(mode="after")
    def _status_agrees(self) -> LabResult:
        # A result built only with ``valid=False`` is invalid; one with ``superseded_by`` is
        # superseded — so a writer that sets one of them cannot leave the other saying otherwise.
        if self.superseded_by and self.status != "superseded":
            object.__setattr__(self, "status", "superseded")
        elif "status" not in self.model_fields_set and self.valid is False and self.status == "valid":
            object.__setattr__(self, "status", "invalid")
        return self

    @property
    def live(self) -> bool:
        """Not replaced by a later result (it counts, valid or not)."""
        return self.status != "superseded"


class Bottle(_Record):
    """A sample bottle: its label (typed or scanned), kind, times, preservation, later lab results."""

    id: str = _id_field()
    label: str = Field(min_length=1, max_length=40)
    kind: Literal["do-fixed", "bod", "duplicate", "blank"]
    collected_at: AwareDatetime
    fixed_at: AwareDatetime | None = None
    preservation: str = Field(default="", max_length=120)
    notes: str = Field(default="", max_length=2000)
    lab_results: list[LabResult] = Field(default_factory=list, json_schema_extra=RETAINED)
    #: For a field duplicate: the label of the bottle it duplicates (same analysis, same stop).
    duplicate_of: str | None = Field(default=None, max_length=40)

    _texts = _not_blank("label")


class SiteSnapshot(_Record):
    """The site facts a stop's checks used when the stop was saved: elevation, water class and the
    criteria that applied (the site's own, else the program's for its class). Set by the store the
    first time the stop is saved with its site known; QC judges the stop by it, so a later edit of
    the site list or the program's criteria does not re-judge old records."""

    site_id: str = Field(min_length=1, max_length=32)
    name: str = Field(default="", max_length=120)
    elevation_m: float
    water_class: Literal["warm", "cold"] | None = None
    #: The DO criterion that applied (mg/L); None: no below-criterion check.
    min_do_mg_l: float | None = None
    #: The supersaturation threshold that applied (%).
    supersaturation_percent: float | None = None

    _ranges = _ranged(elevation_m="elevation")


class Stop(_Record):
    """A site visit: readings as typed and normalised, bottles, notes; `derived` is set by the store."""

    id: str = _id_field()
    site_id: str = Field(min_length=1, max_length=32)
    arrived_at: AwareDatetime
    temp: Quantity | None = None
    pressure: Quantity | None = None
    conductivity: Quantity | None = None
    #: True when `conductivity` is already specific conductance (at 25 °C).
    conductivity_is_sc25: bool = False
    do: Quantity | None = None
    bottles: list[Bottle] = Field(default_factory=list)
    notes: str = Field(default="", max_length=4000)
    weather: str = Field(default="", max_length=400)
    flow: str = Field(default="", max_length=400)
    closed_at: AwareDatetime | None = None
    derived: Derived | None = Field(None, json_schema_extra=_role(DERIVED))
    #: The site facts this stop's checks use (see SiteSnapshot); set by the store's derive step,
    #: which keeps the stored one when a writer leaves it out (so it merges like derived values).
    site_snapshot: SiteSnapshot | None = Field(None, json_schema_extra=_role(DERIVED))

    _quantities = _measured("temp", "pressure", "conductivity", "do")


class AuditChange(_Record):
    """One field a save changed: its path, the value it replaced and the new one.

    Values longer than :data:`AUDIT_VALUE_BYTES` as JSON are kept as the start of their JSON
    text with ``truncated`` set (the audit stays small; the full value is in the trip or in
    the version that replaced it).
    """

    path: str = Field(max_length=400)
    old: Any = None
    new: Any = None
    truncated: bool = False


#: Largest value (bytes of compact JSON) an audit entry keeps whole; longer ones are cut.
AUDIT_VALUE_BYTES = 600


class AuditEntry(_Record):
    """One change to a trip: when, which device, what (a sentence, the changed field paths and,
    for each, the value it replaced and the new one), and — for a settlement or a correction —
    who and why."""

    id: str = _id_field()
    at: AwareDatetime
    device_id: str
    change: str = Field(max_length=400)
    revision: int
    fields: list[str] = Field(default_factory=list)
    changes: list[AuditChange] = Field(default_factory=list)
    #: The saving device's name as set on it (``streamtab device name``), so people read a name.
    device_name: str | None = Field(default=None, max_length=40)
    by: str | None = Field(default=None, max_length=80)
    reason: str | None = Field(default=None, max_length=400)


class ConflictSide(_Record):
    """One device's value of a field that two devices changed differently."""

    device_id: str
    #: The device's name as set on it, when its saves carried one.
    device_name: str | None = None
    value: Any = None
    revision: int | None = None
    updated_at: AwareDatetime | None = None


class Conflict(_Record):
    """A field two devices changed differently; sync fills these, a person resolves them."""

    id: str = _id_field()
    #: "field": one field with two values; "results": two live results of one analysis on one
    #: bottle (the sides' values are the results).
    kind: Literal["field", "results"] = "field"
    path: str
    #: The same path with full element ids (``stops[<id>].do``), where the clash is.
    locator: str | None = None
    sides: list[ConflictSide] = Field(default_factory=list)
    detected_at: AwareDatetime
    resolved_at: AwareDatetime | None = None
    resolved_by: str | None = None
    #: The settlement: ``{"kept": n (1-based side, or None for a typed value), "value": ...}``.
    resolution: Any = None


class InstrumentLog(_Record):
    """One DO meter's calibration log in the program's settings (USGS NFM A6.2 checks; limits common practice)."""

    serial: str = Field(min_length=1, max_length=64)
    membrane_changed_at: AwareDatetime | None = None
    zero_do_mg_l: float | None = None
    zero_do_limit_mg_l: float = Field(0.2, gt=0.0, le=2.0)
    zero_checked_at: AwareDatetime | None = None
    barometer_difference_hpa: float | None = Field(None, ge=-200.0, le=200.0)
    barometer_limit_hpa: float = Field(2.0, gt=0.0, le=20.0)
    barometer_checked_at: AwareDatetime | None = None
    #: Post-trip drift limit of this meter, in mg/L or in % of the 100 % target.
    drift_limit: float = Field(0.2, gt=0.0, le=50.0)
    drift_unit: Literal["mg/L", "%"] = "mg/L"

    def flags(self):
        """The zero-DO and barometer findings of this log (core.science.calibration.instrument_flags)."""
        from core.science.calibration import instrument_flags

        return instrument_flags(
            self.serial,
            zero_do_mg_l=self.zero_do_mg_l,
            zero_do_limit_mg_l=self.zero_do_limit_mg_l,
            barometer_difference_hpa=self.barometer_difference_hpa,
            barometer_limit_hpa=self.barometer_limit_hpa,
        )


class ProgramSettings(_Record):
    """A monitoring program's settings: method, criteria, tolerances and QC thresholds."""

    schema_version: int = SCHEMA_VERSION
    program: str = Field(default="", max_length=120)
    method: Literal["benson-krause", "garcia-gordon"] = "benson-krause"
    warm_min_mg_l: float = Field(
        5.0, ge=LIMITS["criterion"][0], le=LIMITS["criterion"][1]
    )  # common practice (many state standards; EPA 1986 differs)
    cold_min_mg_l: float = Field(
        6.5, ge=LIMITS["criterion"][0], le=LIMITS["criterion"][1]
    )  # US EPA 440/5-86-003 (1986) cold-water 30-day mean, from memory
    supersaturation_percent: float = Field(
        120.0, ge=LIMITS["supersaturation"][0], le=LIMITS["supersaturation"][1]
    )  # common practice
    hypoxic_mg_l: float = Field(2.0, ge=LIMITS["criterion"][0], le=LIMITS["criterion"][1])  # common practice
    #: Life stages the program protects ("other" or "early": embryos and larvae present); picks the EPA 1986
    #: 1-day minimum a spot reading is compared with (core.science.criteria.EPA_1986_MG_L, from memory).
    life_stage: Literal["other", "early"] = "other"
    calibration_tolerance_mg_l: float = Field(
        0.2, gt=LIMITS["tolerance"][0], le=LIMITS["tolerance"][1]
    )  # common practice (USGS NFM A6.2 method)
    #: Elevation where the meter is calibrated (the office), m; None: the trip's first site. The
    #: calibration pressure is checked against it like a stop's pressure.
    calibration_elevation_m: float | None = Field(None, ge=LIMITS["elevation"][0], le=LIMITS["elevation"][1])
    #: What the program's meters mean by 100 %: saturation at the local pressure, or at 760 mmHg
    #: (core.science.oxygen.PERCENT_BASES); a trip's own meter setting (Trip.meter_percent_basis) wins.
    percent_basis: Literal["local", "sea-level"] = "local"
    #: Temperature compensation of specific conductance: linear with `conductivity_alpha_per_c`
    #: (Standard Methods 2510 B; natural waters 0.0175–0.0198, Hayashi 2004), or the ISO 7888 table.
    conductivity_compensation: Literal["linear", "iso7888"] = "linear"
    conductivity_alpha_per_c: float = Field(0.0191, ge=ALPHA_RANGE_PER_C[0], le=ALPHA_RANGE_PER_C[1])
    #: How many decimals reports and exports show, by quantity (core.rules.report.Rounding: do_mg_l, percent,
    #: temp_c, pressure_hpa, conductivity_sig, salinity, bod_mg_l, calibration_mg_l); missing keys keep the
    #: defaults (DO 0.1 mg/L, % whole, 0.1 °C, 0.1 hPa, specific conductance 3 significant figures; common
    #: practice). Stored values are never rounded; exports can be asked for full precision.
    reporting_decimals: dict[str, int] = Field(default_factory=dict)
    #: Calibration logs of the program's DO meters, matched to a trip by its meter ID (the serial).
    instruments: list[InstrumentLog] = Field(default_factory=list)

    def instrument(self, meter_id: str) -> InstrumentLog | None:
        """The log of the meter a trip names (by serial, case and spaces ignored), or None."""
        key = (meter_id or "").strip().lower()
        return next((i for i in self.instruments if key and i.serial.strip().lower() == key), None)

    #: Holding-time overrides by kind (hours), e.g. {"bod": 24} for a stricter SOP.
    holding_overrides_h: dict[str, float] = Field(default_factory=dict)
    #: Plausible stream ranges (warning outside; common practice, adjust per program).
    temp_plausible_c: tuple[float, float] = (0.0, 35.0)
    conductivity_plausible_us_cm: tuple[float, float] = (5.0, 5000.0)
    #: Jumps between consecutive stops that ask for a second look (common practice).
    temp_jump_c: float = Field(8.0, gt=0.0, le=40.0)
    conductivity_jump_ratio: float = Field(3.0, gt=1.0, le=1000.0)
    #: When the settings last changed (set by the store); sync keeps the newest settings.
    updated_at: AwareDatetime | None = None

    @field_validator("temp_plausible_c", "conductivity_plausible_us_cm", mode="before")
    @classmethod
    def _pair(cls, v: Any) -> Any:
        return tuple(v) if isinstance(v, list) else v

    def criteria(self):
        from core.science.criteria import Criteria

        return Criteria(
            warm_min_mg_l=self.warm_min_mg_l,
            cold_min_mg_l=self.cold_min_mg_l,
            supersaturation_percent=self.supersaturation_percent,
            hypoxic_mg_l=self.hypoxic_mg_l,
            life_stage=self.life_stage,
        )


class ReviewEvent(_Record):
    """One step of the office's review of a trip (who, when, what, why); appended, never edited.

    ``action`` is one of ``core.rules.review.ACTIONS``; the trip's review state follows from its
    events (``core.rules.review.review_state``). ``approved`` holds, on a correction of an approved
    trip, the document as it was approved, so that version stays readable.
    """

    id: str = _id_field()
    action: Literal["reviewed", "approved", "returned", "corrected", "resubmitted"]
    at: AwareDatetime
    by: str = Field(min_length=1, max_length=80)
    comment: str = Field(default="", max_length=2000)
    reasons: list[str] = Field(default_factory=list)
    revision: int | None = None  # the trip revision the step was taken on
    approved: dict[str, Any] | None = None


#: Bounds of a drawn signature, so a stuck finger cannot grow a trip without end (common practice):
#: strokes per signature, points per stroke, points in all.
SIGNATURE_LIMITS = {"strokes": 200, "points_per_stroke": 2000, "points": 10000}


class Signature(_Record):
    """A signature drawn with a finger, kept as vector strokes so it syncs and prints sharply.

    ``strokes`` is a list of strokes, each a list of ``[x, y]`` points as fractions of the pad
    (0 to 1; x to the right, y downwards); ``aspect`` is the pad's width over its height, so the
    drawing is printed with its own proportions. ``name`` is the person who signed, as typed.
    """

    id: str = _id_field()
    name: str = Field(min_length=1, max_length=120)
    signed_at: AwareDatetime
    aspect: float = Field(3.0, gt=0.2, le=20.0)
    strokes: list[list[list[float]]] = Field(default_factory=list)

    @field_validator("strokes")
    @classmethod
    def _strokes(cls, v: list[list[list[float]]]) -> list[list[list[float]]]:
        lim = SIGNATURE_LIMITS
        if len(v) > lim["strokes"] or sum(len(s) for s in v) > lim["points"]:
            raise PydanticCustomError(
                "signature.too_long",
                "more than {strokes} strokes or {points} points",
                {"strokes": lim["strokes"], "points": lim["points"]},
            )
        for stroke in v:
            if len(stroke) > lim["points_per_stroke"]:
                raise PydanticCustomError(
                    "signature.too_long", "a stroke of more than {n} points", {"n": lim["points_per_stroke"]}
                )
            for point in stroke:
                if len(point) != 2 or not all(0.0 <= c <= 1.0 for c in point):
                    raise PydanticCustomError("signature.point", "a point outside the pad: {point}", {"point": point})
        return v


class CustodyRecord(_Record):
    """One hand-off of bottles: who let go of them, who took them, when, and in what state.

    ``bottle_ids`` are the ids of the bottles handed over (labels can repeat; ids cannot).
    ``at_lab`` marks the receipt at the laboratory (the sample receipt): ``temp`` (temperature on
    receipt, as typed) and ``condition`` ("intact, on ice") belong there, though any hand-off may
    carry them. A hand-off entered without a tablet has no signatures: it is unsigned.
    """

    id: str = _id_field()
    bottle_ids: list[str] = Field(default_factory=list)
    relinquished_by: str = Field(min_length=1, max_length=120)
    received_by: str = Field(min_length=1, max_length=120)
    at: AwareDatetime
    at_lab: bool = False
    temp: Quantity | None = None
    condition: str = Field(default="", max_length=400)
    notes: str = Field(default="", max_length=2000)
    relinquished_signature: Signature | None = None
    received_signature: Signature | None = None

    _texts = _not_blank("relinquished_by", "received_by")
    _quantities = _measured("temp")

    @property
    def signed(self) -> bool:
        """Both people signed on the tablet."""
        return self.relinquished_signature is not None and self.received_signature is not None


class LabBatch(_Record):
    """A bench batch: the QC recorded once and applied to every bottle in it.

    BOD: dilution-water blank depletion, the glucose–glutamic acid check, seed controls
    (``{initial_do_mg_l, final_do_mg_l, seed_ml}`` each), incubation times and temperature.
    Winkler: the thiosulfate standardisation (``std_titrant_ml`` of titrant on ``std_ml`` of
    ``std_normality`` bi-iodate, at ``standardised_at``). ``bottle_ids`` are the bottles it covers.
    """

    id: str = _id_field()
    name: str = Field(min_length=1, max_length=40)
    created_at: AwareDatetime
    analyst: str = Field(default="", max_length=40)
    bottle_ids: list[str] = Field(default_factory=list)
    blank_depletion_mg_l: float | None = None
    gga_bod_mg_l: float | None = None
    seed_controls: list[dict[str, float]] = Field(default_factory=list)
    incubation_start: AwareDatetime | None = None
    incubation_end: AwareDatetime | None = None
    incubator_temp_c: float | None = None
    std_titrant_ml: float | None = Field(None, gt=0.0, le=100.0)
    std_ml: float = Field(20.0, gt=0.0, le=100.0)
    std_normality: float = Field(0.025, gt=0.0, le=1.0)
    standardised_at: AwareDatetime | None = None
    notes: str = Field(default="", max_length=2000)


_TRIP_FIELDS: set[str] = set()


class Trip(_Record):
    """A crew's day: route of stops with readings and bottles, calibrations, audit and conflicts.

    Unknown top-level fields (from a newer build with the same schema version) are kept in
    :attr:`extra` and written back unchanged; unknown nested fields are kept in place.
    """

    id: str = Field(
        default_factory=new_id, pattern=r"^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$", json_schema_extra=_role(BOOKKEEPING)
    )
    schema_version: int = Field(SCHEMA_VERSION, json_schema_extra=_role(BOOKKEEPING))
    revision: int = Field(default=0, ge=0, json_schema_extra=_role(BOOKKEEPING))
    updated_at: AwareDatetime | None = Field(None, json_schema_extra=_role(BOOKKEEPING))
    device_id: str = Field(default="", max_length=64, json_schema_extra=_role(BOOKKEEPING))
    program: str = Field(default="", max_length=120)
    crew: list[str] = Field(default_factory=list)
    meter_id: str = Field(default="", max_length=64)
    #: This trip's meter's % basis ("local" or "sea-level"); None: the program setting.
    meter_percent_basis: Literal["local", "sea-level"] | None = None
    started_at: AwareDatetime
    ended_at: AwareDatetime | None = None
    pre_calibration: Calibration | None = Field(None, json_schema_extra=RETAINED)
    post_check: Calibration | None = Field(None, json_schema_extra=RETAINED)
    stops: list[Stop] = Field(default_factory=list)
    notes: str = Field(default="", max_length=4000)
    audit: list[AuditEntry] = Field(default_factory=list, json_schema_extra=_role(LOG))
    #: Input: opening and settling conflicts is a decision about the content (it travels and
    #: counts as a change); sync's merge owns how the list itself is merged.
    conflicts: list[Conflict] = Field(default_factory=list)
    #: Chain of custody of the trip's bottles, in the order entered (optional; absent when empty).
    custody: list[CustodyRecord] = Field(default_factory=list, json_schema_extra=RETAINED)
    #: The office's review steps (core.rules.review; optional; absent when empty).
    review_events: list[ReviewEvent] = Field(default_factory=list, json_schema_extra=RETAINED)
    #: Bench batches whose QC applies to this trip's bottles (optional; absent when empty).
    lab_batches: list[LabBatch] = Field(default_factory=list, json_schema_extra=RETAINED)
    #: The crew started the trip with no pre-trip calibration, saying so (optional; absent when False).
    started_without_calibration: bool = False

    @model_serializer(mode="wrap")
    def _omit_empty_optional_lists(self, handler: Any) -> Any:
        # A trip without hand-offs, batches or review steps (and with the usual calibration) is
        # written exactly as before those fields existed, so older documents keep their bytes and
        # hashes and no save records a change nobody made.
        data = handler(self)
        if isinstance(data, dict):
            for key in ("custody", "lab_batches", "review_events", "started_without_calibration"):
                if not data.get(key):
                    data.pop(key, None)
        return data

    @property
    def extra(self) -> dict[str, Any]:
        """Top-level fields this build does not know, kept as they came."""
        return self.__pydantic_extra__ if self.__pydantic_extra__ is not None else {}

    @model_validator(mode="after")
    def _ended_after_start(self) -> Trip:
        if self.ended_at is not None and self.ended_at < self.started_at:
            raise PydanticCustomError("time.end_before_start", "ended before it started", {"field": "ended_at"})
        return self

    @property
    def open_conflicts(self) -> list[Conflict]:
        return [c for c in self.conflicts if c.resolved_at is None]

    @property
    def status(self) -> str:
        """ "needs attention" with unresolved conflicts, else "in progress" or "ended"."""
        if self.open_conflicts:
            return "needs attention"
        return "in progress" if self.ended_at is None else "ended"

    def stop(self, stop_id: str) -> Stop:
        for s in self.stops:
            if s.id == stop_id:
                return s
        raise KeyError(stop_id)

    def to_document(self) -> dict[str, Any]:
        """The JSON document (plain dict, unknown fields included)."""
        return self.model_dump(mode="json")

    @classmethod
    def from_document(cls, doc: dict[str, Any]) -> Trip:
        """Validates a JSON document (current schema version) strictly, as JSON text would be."""
        from core.store.atomic import canonical_json_bytes

        return cls.model_validate_json(canonical_json_bytes(doc))


# --------------------------------------------------------------------------------------------
# Reading the declared roles
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class RoleNode:
    """The roles of one record's fields and the nodes of the records nested in them.

    ``node.role(key)`` is the key's role (input for a key no model declares, e.g. a field a
    newer build added); ``node.child(key)`` the node of the record held in that field (for a
    list of records, of its elements); both work on plain JSON documents walked key by key.
    """

    model: str
    roles: dict[str, str] = field(default_factory=dict)
    children: dict[str, RoleNode] = field(default_factory=dict)
    #: fields whose content an import or a merge never removes
    retained: frozenset[str] = frozenset()

    def role(self, key: str) -> str:
        return self.roles.get(key, INPUT)

    def child(self, key: str) -> RoleNode:
        return self.children.get(key, _LEAF)

    def keys(self, *roles: str) -> frozenset[str]:
        """This record's field names with one of `roles`."""
        return frozenset(k for k, r in self.roles.items() if r in roles)


_LEAF = RoleNode("(unknown)")


def _records_in(annotation: Any) -> list[type[BaseModel]]:
    """The record classes an annotation holds (through Optional, unions, lists and tuples)."""
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return [annotation]
    origin = typing.get_origin(annotation)
    if origin in (typing.Union, types.UnionType, list, tuple, typing.Annotated):
        out: list[type[BaseModel]] = []
        for arg in typing.get_args(annotation):
            out.extend(_records_in(arg))
        return out
    return []


def _field_role(info: Any) -> str:
    extra = info.json_schema_extra
    return extra.get("role", INPUT) if isinstance(extra, dict) else INPUT


@cache
def role_tree(model: type[BaseModel] | None = None) -> RoleNode:
    """The role tree of `model` (default :class:`Trip`), built from the fields' declarations."""
    model = model or Trip
    roles: dict[str, str] = {}
    children: dict[str, RoleNode] = {}
    retained: set[str] = set()
    for name, info in model.model_fields.items():
        key = info.alias or name
        roles[key] = _field_role(info)
        if isinstance(info.json_schema_extra, dict) and info.json_schema_extra.get("retain"):
            retained.add(key)
        nested = _records_in(info.annotation)
        if nested:
            children[key] = role_tree(nested[0])
    return RoleNode(model.__name__, roles, children, frozenset(retained))


def paths_by_role(role: str, model: type[BaseModel] | None = None) -> list[str]:
    """Every field path of `model` (default :class:`Trip`) with that role, e.g.
    ``"stops[].derived"``; paths inside a field of another role are not listed."""
    out: list[str] = []

    def walk(m: type[BaseModel], prefix: str) -> None:
        for name, info in m.model_fields.items():
            path = f"{prefix}.{name}" if prefix else name
            r = _field_role(info)
            if r == role:
                out.append(path)
            if r != INPUT:
                continue
            for sub in _records_in(info.annotation)[:1]:
                origin = typing.get_origin(info.annotation)
                is_list = origin is list or any(typing.get_origin(a) is list for a in typing.get_args(info.annotation))
                walk(sub, path + ("[]" if is_list else ""))

    walk(model or Trip, "")
    return out


def keys_by_role(*roles: str, model: type[BaseModel] | None = None) -> frozenset[str]:
    """The top-level field names of `model` (default :class:`Trip`) with one of `roles`."""
    return role_tree(model).keys(*roles)


# --------------------------------------------------------------------------------------------
# Building quantities from what a person typed
# --------------------------------------------------------------------------------------------
def measure(kind: str, text: str, *, default_unit: str | None = None, field: str | None = None) -> Quantity:
    """Builds a :class:`Quantity` from typed text, keeping the text exactly.

    kind: "temp" (°C; °F and K converted), "pressure" (hPa; a bare number is refused), "conductivity"
    (µS/cm), "do" (mg/L or %); the grammar, units and limits are core.science.quantities'.
    `default_unit` applies to a bare number (e.g. "C" for a temperature field, "mg/L" for a DO field).
    Raises :class:`InputError` with the field label, what was wrong and the accepted range or units.
    """
    from core.records.messages import label_for

    field = field or kind
    try:
        r = _quantities.read(kind, text, label_for(field), default_unit=default_unit)
    except _quantities.QuantityError as exc:
        raise _input_error(exc, field) from None
    except KeyError:
        raise ValueError(f"unknown kind {kind!r}; accepted: {', '.join(_quantities.KINDS)}") from None
    return Quantity(text=r.text, entered_value=r.number, entered_unit=r.entered_unit, value=r.value, unit=r.unit)


# --------------------------------------------------------------------------------------------
# JSON Schema of a trip document
# --------------------------------------------------------------------------------------------
SCHEMA_PATH = Path(__file__).resolve().parent / "schema" / "trip.schema.json"


def trip_json_schema() -> dict[str, Any]:
    """The JSON Schema of a trip document, generated from :class:`Trip`."""
    schema = Trip.model_json_schema(mode="validation")
    schema["$schema"] = "https://json-schema.org/draft/2020-12/schema"
    schema["$id"] = f"streamtab:trip:v{SCHEMA_VERSION}"
    return schema


def schema_text() -> str:
    return json.dumps(trip_json_schema(), indent=2, sort_keys=True, ensure_ascii=False) + "\n"


def write_trip_schema(path: Path | None = None) -> Path:
    """Regenerates core/records/schema/trip.schema.json (run ``python -m core.records.models``)."""
    from core.store.atomic import write_export

    path = path or SCHEMA_PATH
    write_export(path, schema_text().encode("utf-8"))
    return path


if __name__ == "__main__":  # pragma: no cover - maintenance entry point
    print(write_trip_schema())
