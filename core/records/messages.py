"""Readable validation messages: stable error codes mapped to our own text and field labels."""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any

from core.timefmt import offset_text, when_text

__all__ = [
    "FIELD_LABELS",
    "TEMPLATES",
    "Problem",
    "label_for",
    "path_label",
    "render",
    "problems_from_validation",
    "one_line",
    "when_text",
    "offset_text",
]

#: Field name → label a technician reads. Keys are the last element of a field path.
FIELD_LABELS: dict[str, str] = {
    "temp": "Water temperature",
    "pressure": "Station pressure",
    "conductivity": "Conductivity",
    "do": "Meter DO",
    "do_mg_l": "DO",
    "do_percent": "DO saturation",
    "site_id": "Site",
    "arrived_at": "Arrival time",
    "closed_at": "Stop closing time",
    "started_at": "Trip start time",
    "ended_at": "Trip end time",
    "updated_at": "Last saved time",
    "collected_at": "Collection time",
    "fixed_at": "Fixing time",
    "analysed_at": "Analysis time",
    "detected_at": "Conflict detection time",
    "resolved_at": "Conflict resolution time",
    "at": "Time",
    "label": "Bottle ID",
    "kind": "Kind",
    "preservation": "Preservation",
    "elevation_m": "Elevation",
    "elevation": "Elevation",
    "latitude": "Latitude",
    "longitude": "Longitude",
    "water_class": "Water class",
    "min_do_mg_l": "Site DO criterion",
    "supersaturation_percent": "Supersaturation threshold",
    "warm_min_mg_l": "Warm-water DO criterion",
    "cold_min_mg_l": "Cold-water DO criterion",
    "hypoxic_mg_l": "Hypoxia threshold",
    "calibration_tolerance_mg_l": "Calibration tolerance",
    "temp_jump_c": "Temperature jump threshold",
    "conductivity_jump_ratio": "Conductivity jump factor",
    "name": "Site name",
    "id": "ID",
    "crew": "Crew",
    "program": "Program",
    "meter_id": "Meter ID",
    "device_id": "Device ID",
    "reading_mg_l": "Calibration meter reading",
    "calibration_reading": "Calibration meter reading",
    "cal_temp": "Calibration temperature",
    "cal_pressure": "Calibration pressure",
    "tolerance_mg_l": "Calibration tolerance",
    "tolerance": "Calibration tolerance",
    "pre_calibration": "Pre-trip calibration",
    "post_check": "Post-trip check",
    "schema_version": "Schema version",
    "revision": "Revision",
    "notes": "Notes",
    "receipt_temp": "Temperature on receipt",
    "relinquished_by": "Relinquished by",
    "received_by": "Received by",
    "condition": "Condition on receipt",
    "bottle_ids": "Bottles handed over",
    "strokes": "Signature",
    "signed_at": "Signing time",
    "aspect": "Signature pad shape",
    "weather": "Weather",
    "flow": "Flow",
    "value": "Value",
    "text": "Typed text",
    "unit": "Unit",
    "method": "Method",
    "analyte": "Analyte",
    "conductivity_is_sc25": "Conductivity-is-specific-conductance",
}

#: Parent containers in a path → how a person names them.
_CONTAINERS = {
    "stops": "Stop",
    "bottles": "Bottle",
    "lab_results": "Lab result",
    "audit": "Audit entry",
    "conflicts": "Conflict",
    "sides": "Side",
}


#: Stable code → template. Codes other tools may read; texts are ours.
TEMPLATES: dict[str, str] = {
    "missing": "{label} is required.",
    "missing.part": "{label} has no {part}; a stored reading keeps what was typed (text, entered_value,"
    " entered_unit) beside its value and unit.",
    "number.invalid": "{label}: “{input}” is not a number; type digits such as 12.5 (a decimal comma is fine).",
    "number.not_finite": "{label}: “{input}” is not a usable number; NaN and infinity are refused.",
    "number.bool": "{label}: a yes/no value is not a number; type the number.",
    "number.ambiguous_comma": (
        "{label}: “{input}” is ambiguous (decimal comma or thousands separator?); type {a} or {b}."
    ),
    "number.not_integer": "{label}: “{input}” must be a whole number.",
    "range": "{label} {value} {unit} is outside {low}–{high} {unit}{hint}",
    "unit.invalid": "{label}: “{input}” — {detail}.",
    "unit.mismatch": "{label} must be stored in {expected}, not {unit}.",
    "time.naive": "{label}: “{input}” has no time zone; add an offset such as +00:00 or Z.",
    "time.invalid": "{label}: “{input}” is not a date and time; use ISO 8601 such as 2026-06-14T09:30:00-07:00.",
    "time.end_before_start": "Trip end time is before the trip start time; check both times.",
    "choice.invalid": "{label}: “{input}” is not one of {choices}.",
    "text.invalid": "{label} must be text.",
    "text.blank": "{label} must not be blank.",
    "text.too_long": "{label} is longer than {max} characters.",
    "text.too_short": "{label} must not be empty.",
    "text.pattern": "{label}: “{input}” is not accepted; use letters, digits, '.', '_' or '-' (at most 64).",
    "number.too_small": "{label}: {input} is below the accepted range (from {min}).",
    "number.too_large": "{label}: {input} is above the accepted range (up to {max}).",
    "bool.invalid": "{label}: “{input}” must be true or false.",
    "object.invalid": "{label} must be a group of fields (a JSON object).",
    "list.invalid": "{label} must be a list.",
    "field.invalid": "{label}: “{input}” was not accepted.",
    "signature.too_long": "{label} has too many strokes or points; clear the pad and sign again.",
    "signature.point": "{label} has a point outside the pad; clear the pad and sign again.",
}

# pydantic's error type → our code (never its text)
_PYDANTIC_TYPES = {
    "missing": "missing",
    "float_type": "number.invalid",
    "float_parsing": "number.invalid",
    "int_type": "number.invalid",
    "int_parsing": "number.invalid",
    "int_from_float": "number.not_integer",
    "finite_number": "number.not_finite",
    "timezone_aware": "time.naive",
    "datetime_type": "time.invalid",
    "datetime_parsing": "time.invalid",
    "datetime_from_date_parsing": "time.invalid",
    "datetime_object_invalid": "time.invalid",
    "literal_error": "choice.invalid",
    "enum": "choice.invalid",
    "string_type": "text.invalid",
    "string_too_long": "text.too_long",
    "string_too_short": "text.too_short",
    "string_pattern_mismatch": "text.pattern",
    "greater_than_equal": "number.too_small",
    "greater_than": "number.too_small",
    "less_than_equal": "number.too_large",
    "less_than": "number.too_large",
    "bool_type": "bool.invalid",
    "bool_parsing": "bool.invalid",
    "model_type": "object.invalid",
    "dict_type": "object.invalid",
    "model_attributes_type": "object.invalid",
    "list_type": "list.invalid",
    "tuple_type": "list.invalid",
    "json_invalid": "field.invalid",
}


@dataclass(frozen=True)
class Problem:
    """One thing wrong with a record: stable `code`, dotted `field` path, `label` and `message`."""

    code: str
    field: str
    label: str
    message: str

    def to_dict(self) -> dict[str, str]:
        return {"code": self.code, "field": self.field, "label": self.label, "message": self.message}


#: A Quantity's inner parts: a problem in one is labelled with the quantity's own label.
_QUANTITY_PARTS = frozenset({"text", "entered_value", "entered_unit", "value", "unit"})


def label_for(field: str) -> str:
    """The label of a field name (the last part of a dotted path)."""
    name = str(field).rsplit(".", 1)[-1]
    return FIELD_LABELS.get(name, name.replace("_", " ").capitalize())


def path_label(loc: Iterable[Any]) -> str:
    """A readable label for a pydantic location, e.g. ("stops", 2, "temp") → "Stop 3: Water temperature"."""
    parts: list[str] = []
    loc = [p for p in loc if p not in ("function-after", "function-before", "function-wrap")]
    last_field = None
    i = 0
    while i < len(loc):
        p = loc[i]
        if isinstance(p, str) and p in _CONTAINERS and i + 1 < len(loc) and isinstance(loc[i + 1], int):
            parts.append(f"{_CONTAINERS[p]} {loc[i + 1] + 1}")
            i += 2
            continue
        if isinstance(p, str):
            last_field = p
        i += 1
    # The deepest named field that is not a Quantity's inner part gives the label.
    named = [p for p in loc if isinstance(p, str) and p not in _CONTAINERS]
    field = last_field
    if len(named) >= 2 and named[-1] in _QUANTITY_PARTS and named[-2] in FIELD_LABELS:
        field = named[-2]
    label = label_for(field) if field else "Record"
    return ": ".join(parts + [label]) if parts else label


def _fmt(value: Any) -> str:
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        text = f"{value:g}"
        return "\u2212" + text[1:] if text.startswith("-") else text
    return str(value)


def render(code: str, **ctx: Any) -> str:
    """Our text for a code, filled from `ctx` (label, input, value, low, high, unit, ...)."""
    if code.endswith(".out_of_range"):
        from core.science.quantities import LIMITS, range_message

        kind = ctx.get("kind") or code.rsplit(".", 1)[0]
        if kind in LIMITS:
            return range_message(kind, str(ctx.get("label", "Value")), ctx.get("value"), ctx.get("unit"))
        template = TEMPLATES["range"]
        ctx.setdefault("hint", ".")
    else:
        template = TEMPLATES.get(code, TEMPLATES["field.invalid"])
    ctx.setdefault("label", "Value")
    ctx.setdefault("input", "")
    safe = {k: _fmt(v) for k, v in ctx.items()}

    class _Default(dict):
        def __missing__(self, key: str) -> str:
            return "?"

    return template.format_map(_Default(safe))


def problems_from_validation(exc: Any) -> list[Problem]:
    """Turns a pydantic ValidationError into our :class:`Problem` list (never pydantic's text)."""
    out: list[Problem] = []
    for err in exc.errors(include_url=False):
        etype = err.get("type", "")
        loc = tuple(err.get("loc", ()))
        ctx = dict(err.get("ctx") or {})
        inp = err.get("input")
        if ctx.get("field"):
            loc = loc + (ctx["field"],)
        code = _PYDANTIC_TYPES.get(
            etype, etype if etype in TEMPLATES or etype.endswith(".out_of_range") else "field.invalid"
        )
        if inp is None and code in ("object.invalid", "number.invalid", "text.invalid", "time.invalid"):
            code = "missing"
        if code == "number.invalid" and isinstance(inp, bool):
            code = "number.bool"
        if (
            code == "number.invalid"
            and isinstance(inp, str)
            and inp.strip().lower().lstrip("+-") in ("nan", "inf", "infinity")
        ):
            code = "number.not_finite"
        label = path_label(loc)
        params: dict[str, Any] = {"label": label, "input": _short(inp)}
        template = code
        part = next((p for p in reversed(loc) if isinstance(p, str)), "")
        if code == "missing" and part in _QUANTITY_PARTS and not label.endswith(label_for(part)):
            # The reading is there but lacks an inner part: "is required" would send the person
            # looking for a value they did give.
            template, params["part"] = "missing.part", part
        if code == "choice.invalid":
            params["choices"] = ctx.get("expected", "the listed values")
        elif code == "text.too_long":
            params["max"] = ctx.get("max_length", "?")
        elif code == "number.too_small":
            params["min"] = ctx.get("ge", ctx.get("gt", "?"))
        elif code == "number.too_large":
            params["max"] = ctx.get("le", ctx.get("lt", "?"))
        elif code.endswith(".out_of_range") or code == "unit.mismatch":
            params.update(ctx)
            params["label"] = label
        elif code == "time.end_before_start":
            pass
        field = ".".join(str(p) for p in loc)
        out.append(Problem(code=code, field=field, label=label, message=render(template, **params)))
    return out


def _short(value: Any) -> str:
    if isinstance(value, (dict, list)):
        return "(a " + type(value).__name__ + ")"
    text = str(value)
    return text if len(text) <= 40 else text[:37] + "..."


def one_line(problems: list[Problem], where: str = "") -> str:
    """One line for a person: the first problem, and how many more there are."""
    if not problems:
        return where or "The record was not accepted."
    head = problems[0].message
    more = f" (and {len(problems) - 1} more problem{'s' if len(problems) > 2 else ''})" if len(problems) > 1 else ""
    return f"{where}: {head}{more}" if where else head + more
