"""Conflicts and corrections in words: list a trip's open conflicts, settle one, correct a field.

Pure: a Trip (or its document) in, a new one out; no disk, no clock (``at`` is passed in). The
device store applies the result through ``DeviceStore.update_trip`` with the person's name and
reason in the audit; sync carries the settlement to every device (core.records.merge keeps a
settled conflict settled and its value in place).

A conflict is a field two devices changed differently since they last agreed, or two live
results of one analysis on one bottle recorded on two machines. People see it as: the site and
stop number, the field's label, each value with its unit, the device's name and when — never a
record path or a device id.
"""

from __future__ import annotations

import copy
import re
from collections.abc import Iterable
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import Any

from core.records.exchange import COMPUTED_STOP_COLUMNS
from core.records.messages import label_for
from core.records.models import InputError, Trip, measure, parse_number

__all__ = [
    "ConflictError",
    "ConflictView",
    "CORRECTABLE",
    "list_conflicts",
    "find_conflict",
    "settle",
    "settle_document",
    "correct",
    "route",
    "stop_number",
]


class ConflictError(ValueError):
    """A settlement or correction that cannot be applied; the message says why in words."""


#: Trip CSV export columns (core.records.exchange.STOP_COLUMNS) a correction may change:
#: column → (stop field, kind of value, unit a bare number is read in).
CORRECTABLE: dict[str, tuple[str, str, str]] = {
    "water_temp_c": ("temp", "temp", "°C"),
    "water_temp_as_typed": ("temp", "temp", "°C"),
    "station_pressure_hpa": ("pressure", "pressure", "hPa"),
    "station_pressure_as_typed": ("pressure", "pressure", "hPa"),
    "conductivity_us_cm": ("conductivity", "conductivity", "µS/cm"),
    "conductivity_as_typed": ("conductivity", "conductivity", "µS/cm"),
    "meter_do_value": ("do", "do", "mg/L"),
    "meter_do_as_typed": ("do", "do", "mg/L"),
    "conductivity_is_sc25": ("conductivity_is_sc25", "yes/no", ""),
    "site_id": ("site_id", "text", ""),
    "arrived_at": ("arrived_at", "time", ""),
    "closed_at": ("closed_at", "time", ""),
    "weather": ("weather", "text", ""),
    "flow": ("flow", "text", ""),
    "notes": ("notes", "text", ""),
}
_COMPUTED = frozenset(COMPUTED_STOP_COLUMNS)
#: Units of plain-number fields, by the end of their name.
_UNIT_SUFFIX = (
    ("_mg_l", "mg/L"),
    ("_percent", "%"),
    ("_hpa", "hPa"),
    ("_c", "°C"),
    ("_m", "m"),
    ("_us_cm", "µS/cm"),
    ("_h", "h"),
)
_QUANTITY_KIND = {
    "temp": ("temp", "°C"),
    "pressure": ("pressure", "hPa"),
    "conductivity": ("conductivity", "µS/cm"),
    "do": ("do", "mg/L"),
}
_TOKEN = re.compile(r"([A-Za-z_][A-Za-z0-9_]*)(?:\[([^\]]*)\])?")


@dataclass(frozen=True)
class ConflictView:
    """One open conflict as a person reads it (``to_dict`` is the JSON of `trip conflicts`;
    ``label`` is the field's label, written as ``field`` there)."""

    id: str
    number: int
    stop: int | None
    site_id: str | None
    label: str
    values: list[dict[str, Any]] = field(default_factory=list)
    message: str = ""
    kind: str = "field"
    settled: bool = False

    def to_dict(self) -> dict[str, Any]:
        return {
            "id": self.id,
            "number": self.number,
            "stop": self.stop,
            "site_id": self.site_id,
            "field": self.label,
            "kind": self.kind,
            "values": list(self.values),
            "message": self.message,
            "settled": self.settled,
        }


# --------------------------------------------------------------------------------------------
# Finding where a conflict is
# --------------------------------------------------------------------------------------------
def _steps(path: str) -> list[tuple[str, str | None]]:
    """``stops[LK-01 57e55725].do`` → [("stops", "LK-01 57e55725"), ("do", None)]."""
    out: list[tuple[str, str | None]] = []
    pos = 0
    while pos < len(path):
        m = _TOKEN.match(path, pos)
        if m is None:
            raise ConflictError("the conflict names a place in the trip this build cannot read")
        out.append((m.group(1), m.group(2)))
        pos = m.end()
        if pos < len(path) and path[pos] == ".":
            pos += 1
    return out


def _element(items: list[Any], ref: str) -> dict[str, Any] | None:
    """The element of an id list named by a full id or by a hint ("LK-01 57e55725", "57e55725")."""
    dicts = [e for e in items if isinstance(e, dict)]
    for e in dicts:
        if e.get("id") == ref:
            return e
    prefix = ref.rsplit(" ", 1)[-1]
    found = [e for e in dicts if str(e.get("id", "")).startswith(prefix)]
    return found[0] if len(found) == 1 else None


def _where(doc: dict[str, Any], conflict: dict[str, Any]) -> tuple[dict[str, Any] | None, dict[str, Any], str]:
    """(the stop the conflict is in or None, the record holding the field, the field's key)."""
    steps = _steps(str(conflict.get("locator") or conflict.get("path") or ""))
    if not steps:
        raise ConflictError("the conflict names no field")
    holder: dict[str, Any] = doc
    stop: dict[str, Any] | None = None
    for i, (key, ref) in enumerate(steps):
        last = i == len(steps) - 1
        if ref is None:
            if last:
                return stop, holder, key
            nxt = holder.get(key)
            if not isinstance(nxt, dict):
                raise ConflictError(f"the trip no longer has {label_for(key).lower()}")
            holder = nxt
            continue
        items = holder.get(key)
        if last:  # lab_results[<analyte>]: the list itself is what the conflict is about
            return stop, holder, key
        elem = _element(items if isinstance(items, list) else [], ref)
        if elem is None:
            what = {"stops": "stop", "bottles": "bottle"}.get(key, "record")
            raise ConflictError(f"the {what} this conflict is about is no longer in the trip")
        if key == "stops":
            stop = elem
        holder = elem
    raise ConflictError("the conflict names no field")  # pragma: no cover - the loop returns


def _arrival(stop: dict[str, Any]) -> tuple[datetime, str]:
    try:
        at = datetime.fromisoformat(str(stop.get("arrived_at")).replace("Z", "+00:00"))
    except ValueError:
        at = datetime.min.replace(tzinfo=UTC)
    if at.tzinfo is None:
        at = at.replace(tzinfo=UTC)
    return at, str(stop.get("id"))


def route(doc: dict[str, Any]) -> list[dict[str, Any]]:
    """The trip's stops in route order (by arrival time), numbered 1, 2, … as `trip show` lists them."""
    return sorted((s for s in doc.get("stops") or [] if isinstance(s, dict)), key=_arrival)


def stop_number(doc: dict[str, Any], stop_id: str) -> int | None:
    """The stop's number on the route (1 = first by arrival time), as `trip show` lists them."""
    for n, s in enumerate(route(doc), 1):
        if s.get("id") == stop_id:
            return n
    return None


# --------------------------------------------------------------------------------------------
# Showing values in words
# --------------------------------------------------------------------------------------------
def _unit_of(key: str) -> str:
    for suffix, unit in _UNIT_SUFFIX:
        if key.endswith(suffix):
            return unit
    return ""


def _show(value: Any, key: str, *, removed: bool = False) -> str:
    if removed:
        return "(removed)"
    if value is None or value == "":
        return "(empty)"
    if isinstance(value, dict) and isinstance(value.get("text"), str) and "unit" in value:
        text = value["text"].strip()
        unit = str(value.get("unit") or "")
        has_unit = any(ch.isalpha() or ch in "°%µ" for ch in text)
        return text if has_unit or not unit else f"{text} {unit}"
    if isinstance(value, dict) and "analyte" in value:  # a lab result
        v = value.get("value")
        shown = "no value" if v is None else f"{v:g} {value.get('unit') or ''}".strip()
        who = f" by {value['analyst']}" if value.get("analyst") else ""
        when = f" at {value['analysed_at']}" if value.get("analysed_at") else ""
        return f"{shown}{who}{when}"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, (int, float)):
        unit = _unit_of(key)
        return f"{value:g} {unit}".strip()
    if isinstance(value, str):
        return f"“{value}”"
    if isinstance(value, list):
        return ", ".join(_show(v, key) for v in value) or "(empty)"
    return "(a record)"


def _device_names(doc: dict[str, Any]) -> dict[str, str]:
    names: dict[str, str] = {}
    for e in doc.get("audit") or []:
        if isinstance(e, dict) and e.get("device_name") and e.get("device_id"):
            names[str(e["device_id"])] = str(e["device_name"])
    return names


def _device(side: dict[str, Any], names: dict[str, str], this_device: str | None) -> str:
    if side.get("device_name"):
        return str(side["device_name"])
    dev = str(side.get("device_id") or "")
    if dev in names:
        return names[dev]
    if this_device and dev == this_device:
        return "this device"
    return "a device with no name set"


def _when(side: dict[str, Any]) -> str:
    at = side.get("updated_at")
    if not at:
        return ""
    try:
        return datetime.fromisoformat(str(at).replace("Z", "+00:00")).strftime("%Y-%m-%d %H:%M %z").strip()
    except ValueError:
        return str(at)


def _label(conflict: dict[str, Any], key: str, holder: dict[str, Any]) -> str:
    if conflict.get("kind") == "results":
        analyte = str(conflict.get("path", "")).rsplit("[", 1)[-1].rstrip("]")
        name = {"do_winkler": "Winkler DO", "bod5": "BOD5"}.get(analyte, analyte)
        return f"{name} result of bottle {holder.get('label', '')}".strip()
    label = label_for(key)
    if "label" in holder and "kind" in holder and "collected_at" in holder:
        return f"{label} of bottle {holder['label']}"
    return label


def _views(doc: dict[str, Any], *, this_device: str | None, settled: bool) -> list[ConflictView]:
    names = _device_names(doc)
    out: list[ConflictView] = []
    number = 0
    for c in doc.get("conflicts") or []:
        if not isinstance(c, dict) or bool(c.get("resolved_at")) != settled:
            continue
        number += 1
        try:
            stop, holder, key = _where(doc, c)
            label = _label(c, key, holder)
        except ConflictError:
            stop, holder, key, label = None, {}, "", label_for(str(c.get("path", "")).rsplit(".", 1)[-1])
        n = stop_number(doc, stop["id"]) if stop else None
        site = stop.get("site_id") if stop else None
        values = []
        for i, side in enumerate(c.get("sides") or [], 1):
            if not isinstance(side, dict):
                continue
            values.append(
                {
                    "n": i,
                    "value": side.get("value"),
                    "text": _show(side.get("value"), key, removed=bool(side.get("removed"))),
                    "device": _device(side, names, this_device),
                    "at": _when(side),
                }
            )
        where = f"{site} (stop {n})" if stop else "The trip"
        parts = [f"{v['n']}) {v['text']} from {v['device']}" + (f" at {v['at']}" if v["at"] else "") for v in values]
        if c.get("kind") == "results":
            msg = f"{where}: two live {label}s were recorded on two devices — " + "; ".join(parts) + "."
        else:
            msg = f"{where}: {label} was changed on two devices — " + "; ".join(parts) + "."
        out.append(
            ConflictView(str(c.get("id")), number, n, site, label, values, msg, str(c.get("kind") or "field"), settled)
        )
    return out


def list_conflicts(
    trip: Trip | dict[str, Any], *, this_device: str | None = None, settled: bool = False
) -> list[ConflictView]:
    """The trip's open conflicts (or, with `settled`, the settled ones), numbered 1, 2, … in the
    trip's order, each with its site and stop number, the field's label and every value in words."""
    doc = trip.to_document() if isinstance(trip, Trip) else trip
    return _views(doc, this_device=this_device, settled=settled)


def find_conflict(trip: Trip | dict[str, Any], ref: str) -> dict[str, Any]:
    """An open conflict by its number in :func:`list_conflicts` or by its id (or a unique start of it)."""
    doc = trip.to_document() if isinstance(trip, Trip) else trip
    open_ = [c for c in doc.get("conflicts") or [] if isinstance(c, dict) and not c.get("resolved_at")]
    text = str(ref).strip()
    if text.isdigit() and 1 <= int(text) <= len(open_):
        return open_[int(text) - 1]
    found = [c for c in open_ if str(c.get("id", "")).startswith(text)] if len(text) >= 4 else []
    if len(found) == 1:
        return found[0]
    if not open_:
        raise ConflictError("this trip has no open conflicts")
    raise ConflictError(
        f"no open conflict {text!r}: give its number (1 to {len(open_)}) from"
        " 'streamtab trip conflicts' or the start of its id"
    )


# --------------------------------------------------------------------------------------------
# Reading a typed value the way the app reads it
# --------------------------------------------------------------------------------------------
def _parse_time(text: str, what: str) -> str:
    try:
        when = datetime.fromisoformat(text.strip())
    except ValueError:
        raise ConflictError(f"{what}: {text!r} is not a time; write it as 2026-06-14T09:30-07:00") from None
    if when.tzinfo is None:
        raise ConflictError(f"{what}: {text!r} has no time zone; add the offset, e.g. 2026-06-14T09:30-07:00")
    return when.isoformat()


def _measure(kind: str, text: str, unit: str, key: str) -> dict[str, Any]:
    """A reading typed as on the tablet: a bare number gets the field's unit, as the app's unit
    picker adds it ("13,1" in a °C field is kept as "13,1 °C")."""
    typed = str(text).strip()
    try:
        parse_number(typed, key)
        typed = f"{typed} {unit}"
    except InputError:
        pass
    return measure(kind, typed, field=key).model_dump(mode="json")


def _parse(key: str, text: str, current: Any) -> Any:
    """The stored form of `text` typed for field `key` (the rules of the app's forms)."""
    label = label_for(key)
    try:
        if key in _QUANTITY_KIND:
            kind, unit = _QUANTITY_KIND[key]
            if key == "do" and isinstance(current, dict) and current.get("unit") == "%":
                unit = "%"
            return _measure(kind, text, unit, key)
        if key.endswith("_at"):
            return _parse_time(text, label)
        if isinstance(current, bool) or key.startswith("conductivity_is"):
            low = text.strip().lower()
            if low in ("yes", "true", "1"):
                return True
            if low in ("no", "false", "0"):
                return False
            raise ConflictError(f"{label}: write yes or no")
        if isinstance(current, (int, float)) or _unit_of(key):
            return parse_number(text, key)
    except InputError as exc:
        raise ConflictError(exc.message) from None
    return text


# --------------------------------------------------------------------------------------------
# Settling and correcting
# --------------------------------------------------------------------------------------------
def _on_approved(before: dict[str, Any], after: dict[str, Any], *, by: str, at: datetime, reason: str) -> None:
    """An approved trip changes only with a correction step (core.rules.review): add one to
    `after`, keeping the approved version readable."""
    from core.rules.review import REVIEW_KEY, ReviewRefused, new_event, review_state

    if review_state(before) != "approved":
        return
    approved = {k: v for k, v in before.items() if k not in ("audit", REVIEW_KEY)}
    try:
        event = new_event(before, "corrected", by=by, at=at, reasons=[reason], approved=approved)
    except ReviewRefused as exc:
        raise ConflictError(str(exc)) from None
    after[REVIEW_KEY] = list(after.get(REVIEW_KEY) or []) + [event]


def settle_document(
    doc: dict[str, Any], ref: str, *, keep: int | None = None, value: str | None = None, by: str, at: datetime
) -> dict[str, Any]:
    """A copy of the trip document with one conflict settled (see :func:`settle`)."""
    if (keep is None) == (value is None):
        raise ConflictError("settle with --keep N (one of the values shown) or --value TEXT, one of the two")
    if not str(by or "").strip():
        raise ConflictError("say who settles it (--by NAME)")
    out = copy.deepcopy(doc)
    conflict = find_conflict(out, ref)
    sides = [s for s in conflict.get("sides") or [] if isinstance(s, dict)]
    _stop, holder, key = _where(out, conflict)
    if conflict.get("kind") == "results":
        if keep is None:
            raise ConflictError("two results: keep one of them with --keep N; a result is not typed here")
        if not 1 <= keep <= len(sides):
            raise ConflictError(f"--keep {keep}: choose 1 to {len(sides)}")
        kept = sides[keep - 1].get("value") or {}
        others = {str(s.get("value", {}).get("id")) for i, s in enumerate(sides, 1) if i != keep}
        device = sides[keep - 1].get("device_name") or "the device chosen"
        for r in holder.get(key) or []:
            if isinstance(r, dict) and r.get("id") in others:
                r.update(
                    status="superseded",
                    superseded_by=kept.get("id"),
                    superseded_at=at.isoformat(),
                    superseded_reason=f"conflict settled by {by}: kept the result from {device}"[:400],
                )
        chosen: Any = kept.get("id")
    else:
        if keep is not None:
            if not 1 <= keep <= len(sides):
                raise ConflictError(f"--keep {keep}: choose 1 to {len(sides)}")
            side = sides[keep - 1]
            chosen = None if side.get("removed") else side.get("value")
        else:
            try:
                chosen = _parse(key, str(value), holder.get(key))
            except ConflictError as exc:
                raise ConflictError(f"--value: {exc}") from None
        holder[key] = chosen
    conflict["resolved_at"] = at.isoformat()
    conflict["resolved_by"] = str(by).strip()[:80]
    conflict["resolution"] = {"kept": keep, "value": chosen}
    _on_approved(doc, out, by=str(by).strip()[:80], at=at, reason="conflict settled")
    return out


def settle(trip: Trip, ref: str, *, keep: int | None = None, value: str | None = None, by: str, at: datetime) -> Trip:
    """The trip with conflict `ref` (its number or id) settled: ``keep=N`` keeps the N-th value
    shown, ``value=TEXT`` sets a typed value (read as the app reads that field). The conflict stays
    in the trip, marked settled (who, when, what was kept); for two live results, the one not kept
    is marked superseded. Raises ConflictError (in words) when it cannot be applied."""
    return _valid(settle_document(trip.to_document(), ref, keep=keep, value=value, by=by, at=at))


def correct(
    trip: Trip,
    stop: int,
    column: str,
    value: str,
    *,
    by: str = "",
    at: datetime | None = None,
    reason: str = "",
    site_ids: Iterable[str] = (),
) -> tuple[Trip, str]:
    """(the trip with one field of stop number `stop` corrected, a sentence saying what changed).

    `column` is a trip CSV export column (:data:`CORRECTABLE`); `value` is read as the app reads
    that field (a bare number in the column's unit). Computed columns are refused: correct the
    reading they come from. An approved trip gets the office's correction step (who, when, why;
    core.rules.review), which needs `by`, `at` and `reason`. With `site_ids` (the site list), a stop
    moves only to a site on that list.
    """
    col = str(column).strip()
    if col in _COMPUTED:
        raise ConflictError(
            f"--field {col} is computed from the readings; correct the reading it comes from"
            " (e.g. water_temp_c, station_pressure_hpa, meter_do_value)"
        )
    if col not in CORRECTABLE:
        raise ConflictError(
            f"--field {col!r} is not a field a correction can change; accepted: " + ", ".join(sorted(CORRECTABLE))
        )
    key, kind, unit = CORRECTABLE[col]
    doc = trip.to_document()
    before = copy.deepcopy(doc)
    stops = route(doc)
    if not 1 <= stop <= len(stops):
        raise ConflictError(
            f"--stop {stop}: this trip has stops 1 to {len(stops)}" if stops else "this trip has no stops"
        )
    target = stops[stop - 1]
    old = target.get(key)
    try:  # a refused value names the option and the column the person typed
        if kind in ("temp", "pressure", "conductivity", "do"):
            default = "%" if kind == "do" and isinstance(old, dict) and old.get("unit") == "%" else unit
            try:
                new: Any = _measure(kind, value, default, key)
            except InputError as exc:
                raise ConflictError(exc.message) from None
        elif kind == "yes/no":
            new = _parse("conductivity_is_sc25", value, bool(old))
        elif kind == "time":
            new = _parse_time(value, label_for(key))
        elif key == "site_id":
            new = " ".join(str(value).split())
            known = {s.upper(): s for s in site_ids}
            if not new:
                raise ConflictError("the site code is empty; accepted: a site code from the site list")
            if known and new.upper() not in known:
                names = sorted(known.values())
                more = f", … ({len(names)} in all; see 'streamtab sites list')" if len(names) > 20 else ""
                raise ConflictError(f"{new!r} is not in the site list; accepted: one of {', '.join(names[:20])}{more}")
            new = known.get(new.upper(), new)
        else:
            new = str(value)
    except ConflictError as exc:
        raise ConflictError(f"--value for --field {col}: {exc}") from None
    target[key] = new
    if at is not None and by and reason:
        _on_approved(before, doc, by=by, at=at, reason=reason)
    what = f"stop {stop} ({target.get('site_id')}): {label_for(key)} {_show(old, key)} → {_show(new, key)}"
    return _valid(doc), what


def _valid(doc: dict[str, Any]) -> Trip:
    from pydantic import ValidationError

    from core.records.messages import one_line, problems_from_validation

    try:
        return Trip.from_document(doc)
    except ValidationError as exc:
        raise ConflictError(one_line(problems_from_validation(exc))) from None
