"""Between the app's forms and the store's records (core.records.models): the one place that knows both shapes.

Forms hold text as typed and the chosen unit; records hold core.records.models.Quantity (text as typed,
value as read, normalised value). A value the records refuse (e.g. "68" in °C) is not stored as a
number; its text is kept in the stop's ``draft_text`` (an extra field the store keeps) so that a
restart shows what was typed.
"""

from __future__ import annotations

import copy
import dataclasses
import math
from datetime import datetime
from typing import Any

from mobile.app.forms import BottleForm, CalForm, StopForm, TripForm

__all__ = [
    "site_title",
    "make_site",
    "quantity",
    "stop_document",
    "stop_record",
    "stop_problems",
    "bottle_records",
    "cal_conditions",
    "cal_reading",
    "cal_document",
    "trip_from_form",
    "form_from_trip",
    "rebase_form",
    "KIND_TO_RECORD",
    "RECORD_TO_KIND",
    "TEMP_UNIT_TEXT",
]

TEMP_UNIT_TEXT = {"C": "°C", "F": "°F"}
KIND_TO_RECORD = {"do_fixed": "do-fixed", "bod": "bod", "duplicate": "duplicate", "blank": "blank"}
RECORD_TO_KIND = {v: k for k, v in KIND_TO_RECORD.items()}
PRESERVATION = {
    "do_fixed": "fixed on site (manganous sulfate, alkali-iodide-azide); kept dark",
    "duplicate": "as its parent sample",
    "blank": "as the samples of the trip",
    "bod": "cooled to ≤ 6 °C, not frozen, kept dark",
}
DRAFT_KEY = "draft_text"


def site_title(site: Any) -> str:
    return f"{site.id} {site.name}" if site is not None else ""


def make_site(code: str, name: str, elevation_m: float, water_class: str | None = None):
    from core.records.models import Site

    return Site(id=code, name=name, elevation_m=float(elevation_m), water_class=water_class)


def _iso(when: datetime | None) -> str | None:
    return when.isoformat() if when is not None else None


def _kept_time(when: datetime | None, previous: Any) -> str | None:
    """`when` as stored text: the stored text itself when it names the same instant, so a save
    never rewrites a time into another offset or format (a tablet in another time zone)."""
    if when is None:
        return None
    if isinstance(previous, str):
        try:
            if datetime.fromisoformat(previous) == when:
                return previous
        except ValueError:
            pass
    return when.isoformat()


def _number_text(q: dict[str, Any] | None) -> tuple[str, str]:
    """(number as typed, unit as typed) from a stored Quantity document."""
    if not q:
        return "", ""
    unit = str(q.get("entered_unit") or "")
    text = str(q.get("text") or "").strip()
    if unit and text.endswith(unit):
        text = text[: -len(unit)].strip()
    return text, unit


def _unit_key(unit: str) -> str:
    """A unit's name for comparing two spellings of one choice ("C" and "°C")."""
    return unit.replace("°", "").replace(" ", "").casefold()


def quantity(kind: str, field: str, text: str, unit: str, previous: dict[str, Any] | None = None):
    """The Quantity for a number typed in a form with its chosen unit (raises InputError naming the field).

    When the number is the stored one's as typed and means the same value, the stored Quantity is
    returned unchanged: what was typed ("10.35") is not rewritten ("10.35 mg/L") by a save.
    """
    from core.records.models import Quantity, measure

    q = measure(kind, f"{text} {unit}", field=field)
    if previous:
        old = Quantity.model_validate(previous)
        if (
            _number_text(previous)[0] == text
            and _unit_key(old.entered_unit) == _unit_key(q.entered_unit)
            and math.isclose(old.value, q.value, rel_tol=1e-12, abs_tol=1e-12)
            and math.isclose(old.entered_value, q.entered_value, rel_tol=1e-12, abs_tol=1e-12)
        ):
            return old
    return q


def _quantities(
    form: StopForm,
    previous: dict[str, Any] | None = None,
) -> tuple[dict[str, Any], dict[str, str], dict[str, str]]:
    """The stop's typed values as Quantity documents; refusals by field; drafts (text of refusals)."""
    from core.records.models import InputError

    entries = (
        ("temp", "temp", form.temp_text, TEMP_UNIT_TEXT.get(form.temp_unit, "°C")),
        ("pressure", "pressure", form.pressure_text, form.pressure_unit),
        ("conductivity", "conductivity", form.cond_text, form.cond_unit),
        ("do", "do", form.do_text, "%" if form.do_unit == "%" else "mg/L"),
    )
    values: dict[str, Any] = {}
    errors: dict[str, str] = {}
    drafts: dict[str, str] = {}
    for name, kind, text, unit in entries:
        text = (text or "").strip()
        if not text:
            values[name] = None
            continue
        try:
            q = quantity(kind, name, text, unit, (previous or {}).get(name))
            values[name] = q.model_dump(mode="json")
        except InputError as exc:
            values[name] = None
            errors[name] = exc.message
            drafts[name] = f"{text} {unit}"
    return values, errors, drafts


def stop_problems(form: StopForm) -> dict[str, str]:
    """The refusals of a stop's typed values, by field (empty when every value reads)."""
    return _quantities(form)[1]


def stop_document(
    form: StopForm, previous: dict[str, Any] | None = None
) -> tuple[dict[str, Any] | None, dict[str, str]]:
    """The stop as a JSON document (None until a site is picked) and the refusals by field."""
    values, errors, drafts = _quantities(form, previous)
    if not form.site_id or form.arrived_at is None:
        return None, errors
    doc = dict(previous or {})
    old_bottles = {b.get("id"): b for b in doc.get("bottles") or []}
    bottles = []
    for b in form.bottles:
        bd = dict(old_bottles.get(b.id) or {})
        bd.update(
            id=b.id,
            label=b.label,
            kind=KIND_TO_RECORD[b.kind],
            collected_at=_kept_time(b.collected_at, bd.get("collected_at")),
            fixed_at=_kept_time(b.fixed_at, bd.get("fixed_at")),
            preservation=bd.get("preservation") or PRESERVATION[b.kind],
        )
        bottles.append(bd)
    closed_at = _kept_time(form.closed_at or datetime.now().astimezone(), doc.get("closed_at")) if form.closed else None
    doc.update(
        id=form.id,
        site_id=form.site_id,
        arrived_at=_kept_time(form.arrived_at, doc.get("arrived_at")),
        conductivity_is_sc25=bool(form.cond_is_sc25),
        notes=form.notes,
        bottles=bottles,
        closed_at=closed_at,
        **values,
    )
    doc.pop("derived", None)
    if drafts:
        doc[DRAFT_KEY] = drafts
    else:
        doc.pop(DRAFT_KEY, None)
    return doc, errors


def bottle_records(form: StopForm, previous: dict[str, Any] | None = None) -> list[Any]:
    """The stop's bottles as core records (core.records.models.Bottle), with the lab results the saved
    stop `previous` holds; a bottle not yet valid as a record (no label, no collection time) is left out."""
    from pydantic import ValidationError

    from core.records.models import Bottle
    from core.store.atomic import canonical_json_bytes

    saved = {b.get("id"): b for b in (previous or {}).get("bottles") or [] if isinstance(b, dict)}
    out = []
    for b in form.bottles:
        doc = dict(saved.get(b.id) or {})
        doc.update(
            id=b.id,
            label=b.label,
            kind=KIND_TO_RECORD[b.kind],
            collected_at=_iso(b.collected_at),
            fixed_at=_iso(b.fixed_at),
            preservation=doc.get("preservation") or PRESERVATION[b.kind],
        )
        try:
            out.append(Bottle.model_validate_json(canonical_json_bytes(doc)))
        except ValidationError:
            continue
    return out


def stop_record(form: StopForm, previous: dict[str, Any] | None = None):
    """(core.records.models.Stop | None, refusals by field) for the live view of the stop screen."""
    from core.records.models import Stop

    doc, errors = stop_document(form, previous)
    if doc is None:
        return None, errors
    from core.store.atomic import canonical_json_bytes

    return Stop.model_validate_json(canonical_json_bytes(doc)), errors


CAL_FIELDS = (
    ("temp_text", "Calibration temperature"),
    ("pressure_text", "Calibration pressure"),
    ("reading_text", "Meter reading"),
)


def cal_conditions(cal: CalForm, previous: dict[str, Any] | None = None):
    """(temperature, pressure) Quantities of a calibration form; raises InputError naming the field."""
    prev = previous or {}
    t = quantity("temp", "cal_temp", cal.temp_text.strip(), TEMP_UNIT_TEXT.get(cal.temp_unit, "°C"), prev.get("temp"))
    p = quantity("pressure", "cal_pressure", cal.pressure_text.strip(), cal.pressure_unit, prev.get("pressure"))
    return t, p


def cal_reading(cal: CalForm) -> float:
    """The meter reading typed on a calibration form, mg/L; raises InputError naming the field."""
    from core.records.models import parse_number

    return float(parse_number(cal.reading_text, "reading_mg_l", limit="calibration_reading"))


def cal_document(
    cal: CalForm, kind: str, tolerance_mg_l: float, previous: dict[str, Any] | None = None
) -> tuple[dict[str, Any] | None, str | None]:
    """A calibration form as a Calibration document: (document, None); (None, None) when the form
    is empty; (None, one sentence) when a field is empty or refused, so nothing is dropped silently.

    The stored calibration (`previous`) is the base: its values are kept as stored when the form
    shows them unchanged, its tolerance (the one in force when it was made) and fields this build
    does not know are kept.
    """
    from pydantic import ValidationError

    from core.records.messages import one_line, problems_from_validation
    from core.records.models import Calibration, InputError
    from core.store.atomic import canonical_json_bytes

    filled = [bool(getattr(cal, attr).strip()) for attr, _ in CAL_FIELDS]
    if not any(filled):
        return None, None
    if not all(filled):
        empty = [label for (attr, label), ok in zip(CAL_FIELDS, filled, strict=True) if not ok]
        return None, (
            f"{' and '.join(empty)} {'is' if len(empty) == 1 else 'are'} empty; fill in all three "
            "calibration fields, or clear them all."
        )
    try:
        t, p = cal_conditions(cal, previous)
        reading = cal_reading(cal)
    except InputError as exc:
        return None, exc.message
    doc = dict(previous or {})
    if doc.get("reading_mg_l") is None or not math.isclose(float(doc["reading_mg_l"]), reading, abs_tol=1e-12):
        doc["reading_mg_l"] = reading
    doc.update(
        id=doc.get("id") or cal.id,
        kind=kind,
        temp=t.model_dump(mode="json"),
        pressure=p.model_dump(mode="json"),
        at=_kept_time(cal.at or datetime.now().astimezone(), doc.get("at")),
    )
    doc.setdefault("tolerance_mg_l", float(tolerance_mg_l))
    try:
        Calibration.model_validate_json(canonical_json_bytes(doc))
    except ValidationError as exc:
        return None, one_line(problems_from_validation(exc))
    return doc, None


def trip_from_form(form: TripForm, previous: Any, ctl: Any):
    """The Trip record to save: the last stored trip (audit, lab results, unknown fields kept) with the form on top."""
    from core.records.models import Trip

    doc: dict[str, Any] = previous.model_dump(mode="json") if previous is not None else {}
    old_stops = {s["id"]: s for s in doc.get("stops") or []}
    stops = []
    for s in form.stops:
        sdoc, _ = stop_document(s, old_stops.get(s.id))
        if sdoc is not None:
            stops.append(sdoc)
    ours = {s.id for s in form.stops}
    # stops the stored trip has and this form never had (merged in by sync) are kept as they are
    stops.extend(d for sid, d in old_stops.items() if sid not in ours)
    crew = [c.strip() for c in form.crew.replace(";", ",").split(",") if c.strip()]
    doc.update(
        id=form.id,
        program=form.program.strip(),
        crew=crew,
        meter_id=form.meter_id.strip(),
        started_at=_iso(form.started_at),
        ended_at=_iso(form.ended_at),
        stops=stops,
    )
    if form.meter_percent_basis is not None or doc.get("meter_percent_basis") is not None:
        doc["meter_percent_basis"] = form.meter_percent_basis
    doc.setdefault("revision", 0)
    if form.started_without_calibration:
        doc["started_without_calibration"] = True
    tol = ctl.prefs.tolerance_mg_l if ctl is not None else 0.2
    for key, cal, kind in (("pre_calibration", form.pre_cal, "pre-trip"), ("post_check", form.post_check, "post-trip")):
        cdoc, _problem = cal_document(cal, kind, tol, doc.get(key))
        # a form being typed (partial, refused) leaves the stored calibration as it is; Start and
        # End refuse such a form with its reason (controller), so it is never dropped unseen
        if cdoc is not None:
            doc[key] = cdoc
    return Trip.from_document(doc)


def _text_of(q: Any) -> tuple[str, str]:
    """(number as typed, unit as typed) from a Quantity."""
    if q is None:
        return "", ""
    unit = q.entered_unit or ""
    text = q.text.strip()
    if unit and text.endswith(unit):
        text = text[: -len(unit)].strip()
    return text, unit


def _split_draft(typed: str) -> tuple[str, str]:
    number, _, unit = typed.partition(" ")
    return number, unit.strip()


def form_from_trip(trip: Any) -> TripForm:
    """The forms for a stored trip: text as typed, units as chosen, every time in its own offset."""
    from core.science.conductivity import CONDUCTIVITY_UNITS
    from core.science.pressure import PRESSURE_UNITS

    stops = []
    for s in trip.stops:
        drafts = (s.model_extra or {}).get(DRAFT_KEY) or {}
        f = StopForm(
            id=s.id,
            site_id=s.site_id,
            arrived_at=s.arrived_at,
            cond_is_sc25=s.conductivity_is_sc25,
            notes=s.notes,
            closed=s.closed_at is not None,
            closed_at=s.closed_at,
        )
        for name, attr_text, _attr_unit in (
            ("temp", "temp_text", "temp_unit"),
            ("pressure", "pressure_text", "pressure_unit"),
            ("conductivity", "cond_text", "cond_unit"),
            ("do", "do_text", "do_unit"),
        ):
            text, unit = _split_draft(drafts[name]) if name in drafts else _text_of(getattr(s, name))
            setattr(f, attr_text, text)
            if name == "temp" and unit:
                f.temp_unit = "F" if "F" in unit.upper() else "C"
            elif name == "pressure" and unit in PRESSURE_UNITS:
                f.pressure_unit = unit
            elif name == "conductivity" and unit in CONDUCTIVITY_UNITS:
                f.cond_unit = unit  # as typed: re-opening a trip never rewrites it
            elif name == "do" and unit:
                f.do_unit = "%" if "%" in unit else "mg/L"
        f.bottles = [
            BottleForm(
                id=b.id,
                label=b.label,
                kind=RECORD_TO_KIND.get(b.kind, "do_fixed"),
                collected_at=b.collected_at,
                fixed_at=b.fixed_at,
            )
            for b in s.bottles
        ]
        stops.append(f)

    def cal(c: Any) -> CalForm:
        if c is None:
            return CalForm()
        t, tu = _text_of(c.temp)
        p, pu = _text_of(c.pressure)
        return CalForm(
            id=c.id,
            temp_text=t,
            temp_unit="F" if "F" in tu.upper() else "C",
            pressure_text=p,
            pressure_unit=pu if pu in PRESSURE_UNITS else "hPa",
            reading_text=f"{c.reading_mg_l:g}",
            at=c.at,
        )

    return TripForm(
        id=trip.id,
        program=trip.program,
        crew=", ".join(trip.crew),
        meter_id=trip.meter_id,
        meter_percent_basis=trip.meter_percent_basis,
        started_at=trip.started_at,
        ended_at=trip.ended_at,
        started_without_calibration=trip.started_without_calibration,
        pre_cal=cal(trip.pre_calibration),
        post_check=cal(trip.post_check),
        stops=stops,
    )


TRIP_FORM_FIELDS = (
    "program",
    "crew",
    "meter_id",
    "started_at",
    "ended_at",
    "started_without_calibration",
    "pre_cal",
    "post_check",
)


def rebase_form(form: TripForm, base: TripForm, theirs: TripForm) -> TripForm:
    """This device's edits put on a trip another writer changed (a sync merge, the office's
    correction or settlement): every field where `form` differs from `base` (the form it started
    from) takes the form's value; every other field takes `theirs`. Stops only this form has are
    added; stops only `theirs` has are kept."""
    out = copy.deepcopy(theirs)
    for name in TRIP_FORM_FIELDS:
        if getattr(form, name) != getattr(base, name):
            setattr(out, name, copy.deepcopy(getattr(form, name)))
    base_stops = {s.id: s for s in base.stops}
    out_stops = {s.id: i for i, s in enumerate(out.stops)}
    for stop in form.stops:
        at = out_stops.get(stop.id)
        before = base_stops.get(stop.id)
        if at is None or before is None:
            if at is None:
                out.stops.append(copy.deepcopy(stop))
            else:
                out.stops[at] = copy.deepcopy(stop)
            continue
        target = out.stops[at]
        for f in dataclasses.fields(stop):
            if getattr(stop, f.name) != getattr(before, f.name):
                setattr(target, f.name, copy.deepcopy(getattr(stop, f.name)))
    return out
