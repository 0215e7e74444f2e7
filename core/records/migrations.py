"""Schema migrations of trip documents: lift an older layout to the current one, refuse a newer one.

Version 1 (the first field builds) differs from version 2 as follows:

- ``crew`` was one text ("R.O., J.V."); now a list of initials.
- a stop's site was ``site`` and its time ``time``; now ``site_id`` and ``arrived_at``.
- readings were bare numbers ``temp_c``, ``pressure_hpa``, ``conductivity_us_cm``, ``do_mg_l``;
  now quantities that keep the typed text beside the normalised value.
- bottles had ``bottle_id`` (the label) and no ``id``; audit entries had ``device`` and ``what``
  and no ``id``; there was no ``conflicts`` list.

Version 2 differs from version 3 as follows:

- a lab result's bench findings, superseding and state lived in its free ``inputs`` dict
  (``flags``, ``supersedes``, ``superseded_by``/``superseded_at``/``superseded_reason``); now
  typed fields ``flags``, ``supersedes``, ``superseded_by``, ``superseded_at``,
  ``superseded_reason`` and ``status`` ("valid", "invalid" or "superseded");
- a duplicate bottle's ``duplicate_of`` (the label of the bottle it duplicates) was an extra
  field some builds wrote; now a declared field.

Ids made during migration are UUID version 5 of the trip id and the element's position, so two
devices migrating the same old document agree on them (sync merges by id).
"""

from __future__ import annotations

import copy
import uuid
from collections.abc import Callable
from typing import Any

from core.records.models import SCHEMA_VERSION
from core.store.errors import InvalidRecord, NewerSchemaError

__all__ = ["migrate", "MIGRATIONS", "CURRENT"]

CURRENT = SCHEMA_VERSION
_NS = uuid.UUID("6f1c2a52-3d0e-4b8e-9a57-1d2f5b7c9e01")  # streamtab's own namespace for uuid5


def _rename(doc: dict[str, Any], old: str, new: str) -> None:
    """Moves ``doc[old]`` to ``doc[new]`` unless ``new`` is already there."""
    if old in doc and new not in doc:
        doc[new] = doc.pop(old)


def _uuid5(*parts: Any) -> str:
    return str(uuid.uuid5(_NS, "/".join(str(p) for p in parts)))


def _quantity(value: Any, unit: str, entered_unit: str) -> dict[str, Any] | None:
    if value is None:
        return None
    number = float(value)
    shown = f"{number:g}"
    return {
        "text": f"{shown} {entered_unit}".strip(),
        "entered_value": number,
        "entered_unit": entered_unit,
        "value": number,
        "unit": unit,
    }


def _v1_to_v2(doc: dict[str, Any]) -> dict[str, Any]:
    trip_id = doc.get("id", "")
    crew = doc.get("crew", [])
    if isinstance(crew, str):
        doc["crew"] = [c.strip() for c in crew.replace(";", ",").split(",") if c.strip()]
    stops = []
    for i, stop in enumerate(doc.get("stops") or []):
        stop = dict(stop)
        stop.setdefault("id", _uuid5(trip_id, "stop", i))
        _rename(stop, "site", "site_id")
        _rename(stop, "time", "arrived_at")
        for old, new, unit, typed in (
            ("temp_c", "temp", "°C", "°C"),
            ("pressure_hpa", "pressure", "hPa", "hPa"),
            ("conductivity_us_cm", "conductivity", "µS/cm", "µS/cm"),
            ("do_mg_l", "do", "mg/L", "mg/L"),
        ):
            if old in stop:
                q = _quantity(stop.pop(old), unit, typed)
                if q is not None:
                    stop[new] = q
        bottles = []
        for j, bottle in enumerate(stop.get("bottles") or []):
            bottle = dict(bottle)
            _rename(bottle, "bottle_id", "label")
            bottle.setdefault("id", _uuid5(trip_id, "stop", i, "bottle", j, bottle.get("label", "")))
            bottles.append(bottle)
        stop["bottles"] = bottles
        stop.pop("derived", None)  # recomputed on save
        stops.append(stop)
    doc["stops"] = stops
    audit = []
    for k, entry in enumerate(doc.get("audit") or []):
        entry = dict(entry)
        entry.setdefault("id", _uuid5(trip_id, "audit", k))
        _rename(entry, "device", "device_id")
        _rename(entry, "what", "change")
        entry.setdefault("revision", k + 1)
        entry.setdefault("fields", [])
        audit.append(entry)
    doc["audit"] = audit
    doc.setdefault("conflicts", [])
    doc["schema_version"] = 2
    return doc


_FLAG_KEYS = ("code", "severity", "message", "action", "field")


def _flag(flag: Any) -> dict[str, Any] | None:
    """A v2 flag dict (``inputs["flags"]`` entry) as a typed flag record; None when unusable."""
    if not isinstance(flag, dict) or not isinstance(flag.get("code"), str):
        return None
    out = {k: flag.get(k) for k in _FLAG_KEYS if k in flag}
    out.setdefault("severity", "warning")
    out.setdefault("message", flag["code"])
    if out.get("action") is None:
        out["action"] = ""
    return out


def _lab_result_v3(result: dict[str, Any]) -> dict[str, Any]:
    result = dict(result)
    inputs = dict(result.get("inputs") or {})
    flags = [f for f in (_flag(x) for x in inputs.pop("flags", None) or []) if f is not None]
    result.setdefault("flags", flags)
    supersedes = inputs.pop("supersedes", None)
    if "supersedes" not in result:
        result["supersedes"] = [str(x) for x in supersedes or [] if isinstance(x, str)]
    for key in ("superseded_by", "superseded_at", "superseded_reason"):
        value = inputs.pop(key, None)
        if key not in result and value not in (None, ""):
            result[key] = value
    result["inputs"] = inputs
    if "status" not in result:
        if result.get("superseded_by"):
            result["status"] = "superseded"
        elif result.get("valid") is False:
            result["status"] = "invalid"
        else:
            result["status"] = "valid"
    return result


def _v2_to_v3(doc: dict[str, Any]) -> dict[str, Any]:
    stops = []
    for stop in doc.get("stops") or []:
        stop = dict(stop)
        bottles = []
        for bottle in stop.get("bottles") or []:
            bottle = dict(bottle)
            bottle["lab_results"] = [_lab_result_v3(r) for r in bottle.get("lab_results") or []]
            bottles.append(bottle)
        stop["bottles"] = bottles
        stops.append(stop)
    doc["stops"] = stops
    doc["schema_version"] = 3
    return doc


#: from-version → function lifting a document by one version.
MIGRATIONS: dict[int, Callable[[dict[str, Any]], dict[str, Any]]] = {1: _v1_to_v2, 2: _v2_to_v3}


def migrate(doc: dict[str, Any]) -> dict[str, Any]:
    """The document lifted to the current schema version (the input itself when already current;
    otherwise a lifted copy, the input unchanged).

    Raises core.store.errors.NewerSchemaError for a version newer than this build knows (the
    stored file is left untouched) and InvalidRecord when the version is missing or unknown.
    """

    version = doc.get("schema_version")
    if isinstance(version, bool) or not isinstance(version, int):
        raise InvalidRecord("Schema version is missing or not a whole number; this is not a streamtab trip document.")
    if version > CURRENT:
        raise NewerSchemaError(
            f"Trip {doc.get('id', '?')} was written by a newer streamtab (schema version {version};"
            f" this build knows up to {CURRENT}); update streamtab to open it. The file was left"
            " untouched.",
            version,
            CURRENT,
        )
    if version == CURRENT:
        return doc
    if version < 1 or version not in MIGRATIONS:
        raise InvalidRecord(f"Schema version {version} is unknown; this build reads 1–{CURRENT}.")
    out = copy.deepcopy(doc)
    while out["schema_version"] < CURRENT:
        step = out["schema_version"]
        try:
            out = MIGRATIONS[step](out)
        except (TypeError, ValueError, AttributeError, KeyError) as exc:
            raise InvalidRecord(
                f"A schema version {step} document could not be lifted to version"
                f" {step + 1}: a part of it has an unexpected shape ({type(exc).__name__}: {exc})."
            ) from None
    return out
