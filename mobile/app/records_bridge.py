"""Between the app's forms and the store's records (core.records.models): the one place that knows both shapes.

Forms hold text as typed and the chosen unit; records hold core.records.models.Quantity (text as typed,
value as read, normalised value). A value the records refuse (e.g. "68" in °C) is not stored as a
number; its text is kept in the stop's ``draft_text`` (an extra field the store keeps) so that a
restart shows what was typed.
"""
from __future__ import annotations

from datetime import datetime
from typing import Any

from mobile.app.forms import BottleForm, CalForm, StopForm, TripForm

__all__ = ["site_title", "make_site", "stop_document", "stop_record", "bottle_records", "trip_from_form",
           "form_from_trip", "KIND_TO_RECORD", "RECORD_TO_KIND", "TEMP_UNIT_TEXT"]

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


def _quantities(form: StopForm) -> tuple[dict[str, Any], dict[str, str], dict[str, str]]:
    """The stop's typed values as Quantity documents; refusals by field; drafts (text of refusals)."""
    from core.records.models import InputError, measure

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
        typed = f"{text} {unit}"
        try:
            values[name] = measure(kind, typed, field=name).model_dump(mode="json")
        except InputError as exc:
            values[name] = None
            errors[name] = exc.message
            drafts[name] = typed
    return values, errors, drafts


def stop_document(form: StopForm, previous: dict[str, Any] | None = None) -> tuple[dict[str, Any] | None, dict[str, str]]:
    """The stop as a JSON document (None until a site is picked) and the refusals by field."""
    values, errors, drafts = _quantities(form)
    if not form.site_id or form.arrived_at is None:
        return None, errors
    doc = dict(previous or {})
    old_bottles = {b.get("id"): b for b in doc.get("bottles") or []}
    bottles = []
    for b in form.bottles:
        bd = dict(old_bottles.get(b.id) or {})
        bd.update(id=b.id, label=b.label, kind=KIND_TO_RECORD[b.kind], collected_at=_iso(b.collected_at),
                  fixed_at=_iso(b.fixed_at), preservation=bd.get("preservation") or PRESERVATION[b.kind])
        bottles.append(bd)
    doc.update(id=form.id, site_id=form.site_id, arrived_at=_iso(form.arrived_at),
               conductivity_is_sc25=bool(form.cond_is_sc25), notes=form.notes, bottles=bottles,
               closed_at=_iso(form.closed_at or datetime.now().astimezone()) if form.closed else None,
               **values)
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
        doc.update(id=b.id, label=b.label, kind=KIND_TO_RECORD[b.kind], collected_at=_iso(b.collected_at),
                   fixed_at=_iso(b.fixed_at), preservation=doc.get("preservation") or PRESERVATION[b.kind])
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


def _cal_document(cal: CalForm, kind: str, tolerance_mg_l: float) -> dict[str, Any] | None:
    from core.records.models import InputError, measure, parse_number

    if not (cal.temp_text.strip() and cal.pressure_text.strip() and cal.reading_text.strip()):
        return None
    try:
        t = measure("temp", f"{cal.temp_text.strip()} {TEMP_UNIT_TEXT.get(cal.temp_unit, '°C')}", field="temp")
        p = measure("pressure", f"{cal.pressure_text.strip()} {cal.pressure_unit}", field="pressure")
        r = parse_number(cal.reading_text, "reading_mg_l")
    except InputError:
        return None
    if not 0 <= r <= 25:
        return None
    return {"id": cal.id, "kind": kind, "at": _iso(cal.at or datetime.now().astimezone()),
            "temp": t.model_dump(mode="json"), "pressure": p.model_dump(mode="json"),
            "reading_mg_l": float(r), "tolerance_mg_l": float(tolerance_mg_l)}


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
    doc.update(id=form.id, program=form.program.strip(), crew=crew, meter_id=form.meter_id.strip(),
               started_at=_iso(form.started_at), ended_at=_iso(form.ended_at), stops=stops)
    doc.setdefault("revision", 0)
    tol = ctl.prefs.tolerance_mg_l if ctl is not None else 0.2
    doc["pre_calibration"] = _cal_document(form.pre_cal, "pre-trip", tol) or doc.get("pre_calibration")
    doc["post_check"] = _cal_document(form.post_check, "post-trip", tol) or doc.get("post_check")
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
    from core.science.conductivity import CONDUCTIVITY_UNITS
    from core.science.pressure import PRESSURE_UNITS

    stops = []
    for s in trip.stops:
        drafts = (s.model_extra or {}).get(DRAFT_KEY) or {}
        f = StopForm(id=s.id, site_id=s.site_id, arrived_at=s.arrived_at.astimezone(),
                     cond_is_sc25=s.conductivity_is_sc25, notes=s.notes, closed=s.closed_at is not None,
                     closed_at=s.closed_at.astimezone() if s.closed_at else None)
        for name, attr_text, _attr_unit in (("temp", "temp_text", "temp_unit"),
                                           ("pressure", "pressure_text", "pressure_unit"),
                                           ("conductivity", "cond_text", "cond_unit"),
                                           ("do", "do_text", "do_unit")):
            text, unit = _split_draft(drafts[name]) if name in drafts else _text_of(getattr(s, name))
            setattr(f, attr_text, text)
            if name == "temp" and unit:
                f.temp_unit = "F" if "F" in unit.upper() else "C"
            elif name == "pressure" and unit in PRESSURE_UNITS:
                f.pressure_unit = unit
            elif name == "conductivity" and unit in CONDUCTIVITY_UNITS:
                f.cond_unit = unit
            elif name == "do" and unit:
                f.do_unit = "%" if "%" in unit else "mg/L"
        f.bottles = [BottleForm(id=b.id, label=b.label, kind=RECORD_TO_KIND.get(b.kind, "do_fixed"),
                                collected_at=b.collected_at.astimezone(),
                                fixed_at=b.fixed_at.astimezone() if b.fixed_at else None)
                     for b in s.bottles]
        stops.append(f)

    def cal(c: Any) -> CalForm:
        if c is None:
            return CalForm()
        t, tu = _text_of(c.temp)
        p, pu = _text_of(c.pressure)
        return CalForm(id=c.id, temp_text=t, temp_unit="F" if "F" in tu.upper() else "C",
                       pressure_text=p, pressure_unit=pu if pu in PRESSURE_UNITS else "hPa",
                       reading_text=f"{c.reading_mg_l:g}", at=c.at.astimezone())

    return TripForm(id=trip.id, program=trip.program, crew=", ".join(trip.crew), meter_id=trip.meter_id,
                    started_at=trip.started_at.astimezone(),
                    ended_at=trip.ended_at.astimezone() if trip.ended_at else None,
                    pre_cal=cal(trip.pre_calibration), post_check=cal(trip.post_check), stops=stops)
