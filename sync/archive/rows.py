"""Trip documents as archive rows: pure functions, a document in, a tuple per row out.

The column order of each table is given once here (`COLUMNS`) and used by the loader's COPY.
"""

from __future__ import annotations

import json
from collections.abc import Iterator
from typing import Any

from core.rules.review import review_state

__all__ = ["COLUMNS", "trip_rows", "site_row", "settings_row", "result_status", "season_of"]

_Q = ("text", "entered_value", "entered_unit", "value", "unit")

COLUMNS: dict[str, tuple[str, ...]] = {
    "trips": (
        "trip_id",
        "revision",
        "content_hash",
        "program",
        "crew",
        "meter_id",
        "device_id",
        "started_at",
        "ended_at",
        "season",
        "notes",
        "open_conflicts",
        "updated_at",
        "review_state",
        "document",
    ),
    "stops": (
        "trip_id",
        "stop_id",
        "position",
        "site_id",
        "season",
        "arrived_at",
        "closed_at",
        *(f"{q}_{p}" for q in ("temp", "pressure", "conductivity", "do") for p in _Q),
        "notes",
        "weather",
        "flow",
        "do_sat_mg_l",
        "percent_saturation",
        "do_mg_l",
        "salinity",
        "salinity_source",
        "specific_conductance_us_cm",
        "pressure_hpa",
        "temp_c",
        "method",
        "core_version",
        "basis",
    ),
    "bottles": (
        "trip_id",
        "stop_id",
        "bottle_id",
        "label",
        "kind",
        "collected_at",
        "fixed_at",
        "preservation",
        "notes",
    ),
    "results": (
        "trip_id",
        "stop_id",
        "bottle_id",
        "result_id",
        "analyte",
        "value",
        "unit",
        "qualifier",
        "status",
        "analysed_at",
        "analyst",
        "method",
        "notes",
        "inputs",
    ),
    "calibrations": (
        "trip_id",
        "calibration_id",
        "kind",
        "at",
        "temp_text",
        "temp_value",
        "temp_unit",
        "pressure_text",
        "pressure_value",
        "pressure_unit",
        "reading_mg_l",
        "target_mg_l",
        "difference_mg_l",
        "tolerance_mg_l",
        "accepted",
        "method",
        "notes",
    ),
    "flags": ("trip_id", "owner_kind", "owner_id", "code", "severity", "message", "action", "field"),
    "review_events": ("trip_id", "event_id", "action", "at", "by_name", "comment", "reasons", "revision"),
    "custody": ("trip_id", "bottle_id", "seq", "at", "action", "by_name", "to_name", "notes", "entry"),
}
#: Tables holding a trip's rows, children first (the order rows are written in is the reverse).
TRIP_TABLES = ("trips", "stops", "bottles", "results", "calibrations", "flags", "review_events", "custody")


def _dict(value: Any) -> dict:
    return value if isinstance(value, dict) else {}


def season_of(started_at: str) -> int:
    """The season of a trip: the year of its start as written (the crew's local date)."""
    return int(str(started_at)[:4])


def _quantity(q: Any) -> tuple:
    if not isinstance(q, dict):
        return (None,) * len(_Q)
    return tuple(q.get(k) for k in _Q)


def _flag_rows(tid: str, kind: str, owner: str, flags: Any) -> Iterator[tuple]:
    for f in flags or []:
        if isinstance(f, dict) and f.get("code"):
            yield (
                tid,
                kind,
                owner,
                str(f["code"]),
                str(f.get("severity") or "note"),
                str(f.get("message") or ""),
                str(f.get("action") or ""),
                f.get("field"),
            )


def result_status(result: dict) -> str:
    """reported (the current value), superseded (a re-analysis replaced it), invalid, or pending."""
    inputs = _dict(result.get("inputs"))
    if inputs.get("superseded_by"):
        return "superseded"
    if result.get("valid") is False:
        return "invalid"
    if result.get("value") is None:
        return "pending"
    return "reported"


def _qualifier(result: dict) -> str:
    """The result's qualifier as the lab gave it, else the codes of its lab flags (';'-joined)."""
    inputs = _dict(result.get("inputs"))
    for source in (result, inputs):
        q = source.get("qualifier")
        if isinstance(q, str) and q.strip():
            return q.strip()
    codes = [str(f.get("code")) for f in inputs.get("flags") or [] if isinstance(f, dict) and f.get("code")]
    return ";".join(codes)


def _jsonb(value: Any) -> str:
    return json.dumps(value, ensure_ascii=False, sort_keys=True)


def trip_rows(doc: dict, content_hash: str) -> dict[str, list[tuple]]:
    """Every archive row of one trip document, by table (column order as in `COLUMNS`)."""
    tid = str(doc["id"])
    season = season_of(doc["started_at"])
    out: dict[str, list[tuple]] = {t: [] for t in TRIP_TABLES}
    open_conflicts = sum(1 for c in doc.get("conflicts") or [] if isinstance(c, dict) and not c.get("resolved_at"))
    out["trips"].append(
        (
            tid,
            int(doc.get("revision") or 0),
            content_hash,
            doc.get("program") or "",
            list(doc.get("crew") or []),
            doc.get("meter_id") or "",
            doc.get("device_id") or "",
            doc["started_at"],
            doc.get("ended_at"),
            season,
            doc.get("notes") or "",
            open_conflicts,
            doc.get("updated_at"),
            review_state(doc),
            _jsonb(doc),
        )
    )
    for pos, stop in enumerate(doc.get("stops") or []):
        sid = str(stop["id"])
        d = _dict(stop.get("derived"))
        out["stops"].append(
            (
                tid,
                sid,
                pos,
                stop.get("site_id"),
                season,
                stop.get("arrived_at"),
                stop.get("closed_at"),
                *_quantity(stop.get("temp")),
                *_quantity(stop.get("pressure")),
                *_quantity(stop.get("conductivity")),
                *_quantity(stop.get("do")),
                stop.get("notes") or "",
                stop.get("weather") or "",
                stop.get("flow") or "",
                d.get("do_sat_mg_l"),
                d.get("percent_saturation"),
                d.get("do_mg_l"),
                d.get("salinity"),
                d.get("salinity_source"),
                d.get("specific_conductance_us_cm"),
                d.get("pressure_hpa"),
                d.get("temp_c"),
                d.get("method"),
                d.get("core_version"),
                d.get("basis"),
            )
        )
        out["flags"].extend(_flag_rows(tid, "stop", sid, d.get("flags")))
        for bottle in stop.get("bottles") or []:
            bid = str(bottle["id"])
            out["bottles"].append(
                (
                    tid,
                    sid,
                    bid,
                    bottle.get("label") or "",
                    bottle.get("kind") or "",
                    bottle.get("collected_at"),
                    bottle.get("fixed_at"),
                    bottle.get("preservation") or "",
                    bottle.get("notes") or "",
                )
            )
            for r in bottle.get("lab_results") or []:
                inputs = _dict(r.get("inputs"))
                out["results"].append(
                    (
                        tid,
                        sid,
                        bid,
                        str(r["id"]),
                        r.get("analyte") or "",
                        r.get("value"),
                        r.get("unit") or "",
                        _qualifier(r),
                        result_status(r),
                        r.get("analysed_at"),
                        r.get("analyst") or "",
                        r.get("method") or "",
                        r.get("notes") or "",
                        _jsonb(inputs),
                    )
                )
                out["flags"].extend(_flag_rows(tid, "result", str(r["id"]), inputs.get("flags")))
    for key in ("pre_calibration", "post_check"):
        cal = doc.get(key)
        if not isinstance(cal, dict):
            continue
        cid = str(cal.get("id") or key)
        t = _dict(cal.get("temp"))
        p = _dict(cal.get("pressure"))
        out["calibrations"].append(
            (
                tid,
                cid,
                cal.get("kind") or key,
                cal.get("at"),
                t.get("text"),
                t.get("value"),
                t.get("unit"),
                p.get("text"),
                p.get("value"),
                p.get("unit"),
                cal.get("reading_mg_l"),
                cal.get("target_mg_l"),
                cal.get("difference_mg_l"),
                cal.get("tolerance_mg_l"),
                cal.get("accepted"),
                cal.get("method"),
                cal.get("notes") or "",
            )
        )
        out["flags"].extend(_flag_rows(tid, "calibration", cid, cal.get("flags")))
    for seq, rec in enumerate(doc.get("custody") or []):  # hand-offs, each of several bottles
        if not isinstance(rec, dict):
            continue
        for bid in rec.get("bottle_ids") or []:
            out["custody"].append(
                (
                    tid,
                    str(bid),
                    seq,
                    rec.get("at"),
                    "received at the lab" if rec.get("at_lab") else "handed over",
                    str(rec.get("relinquished_by") or ""),
                    str(rec.get("received_by") or ""),
                    str(rec.get("condition") or rec.get("notes") or ""),
                    _jsonb({k: v for k, v in rec.items() if k not in ("relinquished_signature", "received_signature")}),
                )
            )
    for ev in doc.get("review_events") or []:
        if isinstance(ev, dict) and ev.get("id"):
            out["review_events"].append(
                (
                    tid,
                    str(ev["id"]),
                    ev.get("action") or "",
                    ev.get("at"),
                    ev.get("by") or "",
                    ev.get("comment") or "",
                    list(ev.get("reasons") or []),
                    ev.get("revision"),
                )
            )
    return out


def site_row(site: dict, content_hash: str) -> tuple:
    return (
        site["id"],
        site.get("name") or "",
        site.get("elevation_m"),
        site.get("latitude"),
        site.get("longitude"),
        site.get("water_class"),
        site.get("min_do_mg_l"),
        site.get("supersaturation_percent"),
        site.get("notes") or "",
        content_hash,
    )


def settings_row(settings: dict, content_hash: str) -> tuple:
    return (
        settings.get("program") or "",
        settings.get("method"),
        settings["warm_min_mg_l"],
        settings["cold_min_mg_l"],
        settings.get("supersaturation_percent"),
        settings.get("hypoxic_mg_l"),
        settings.get("calibration_tolerance_mg_l"),
        _jsonb(settings),
        content_hash,
    )
