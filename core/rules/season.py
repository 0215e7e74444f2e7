"""Season tables for the office: tidy rows (one observation per row, one variable per column) over many trips.

Pure: trips, sites and settings in, tables out. Column names carry their unit (``water_temp_c``,
``station_pressure_hpa``). Measured and derived values are rounded by the program's reporting rule
(`core.rules.report.reported`: a `Reported` cell, written as its text in CSV and as a number in the
workbook), or kept at full precision as stored when the export asks for it; each table with rounded
values says which in its ``rounding`` column. ``flag_codes`` are the findings' stable codes for
programs, each once; ``findings`` the same findings in words for people ("Warning: ..."), separated
by " | ". Values typed (``*_as_typed``) and program settings (``criterion_mg_l``, ``tolerance_mg_l``)
are never rounded; stored trips are never changed.
Times are ISO 8601 with their offset; a missing value is an empty cell. The custody table has one
row per bottle per hand-off (``bottle_id`` joins the bottles table). The writers
(`mobile.paper.season`) pass every cell through the one CSV cell guard,
:func:`core.records.exchange.spreadsheet_safe`.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from datetime import date, datetime
from typing import Any

from core.records.models import ProgramSettings, Site, Stop, Trip

__all__ = ["SeasonFilter", "TABLES", "season_tables", "site_series", "trip_in_season"]

#: Table name → columns, in the order they are written.
TABLES: dict[str, tuple[str, ...]] = {
    "stops": (
        "trip_id",
        "program",
        "crew",
        "review_state",
        "stop_id",
        "site_id",
        "site_name",
        "arrived_at",
        "closed_at",
        "water_temp_c",
        "water_temp_as_typed",
        "station_pressure_hpa",
        "station_pressure_as_typed",
        "conductivity_us_cm",
        "conductivity_is_sc25",
        "conductivity_as_typed",
        "meter_do_mg_l",
        "meter_do_percent",
        "meter_do_as_typed",
        "do_sat_mg_l",
        "do_mg_l",
        "percent_saturation",
        "salinity_pss78",
        "salinity_source",
        "specific_conductance_us_cm",
        "criterion_mg_l",
        "method",
        "core_version",
        "flag_codes",
        "findings",
        "weather",
        "flow",
        "notes",
        "rounding",
    ),
    "bottles": (
        "trip_id",
        "stop_id",
        "site_id",
        "bottle_id",
        "label",
        "kind",
        "collected_at",
        "fixed_at",
        "preservation",
        "holding_hours",
        "holding_deadline",
        "custody_status",
        "custody_flag_codes",
        "notes",
    ),
    "results": (
        "trip_id",
        "site_id",
        "stop_id",
        "bottle_id",
        "label",
        "result_id",
        "analyte",
        "value",
        "qualifier",
        "unit",
        "reported",
        "status",
        "holding_status",
        "analyst",
        "analysed_at",
        "method",
        "superseded_by",
        "flag_codes",
        "findings",
        "rounding",
    ),
    "calibrations": (
        "trip_id",
        "calibration_id",
        "kind",
        "at",
        "temp_c",
        "temp_as_typed",
        "pressure_hpa",
        "pressure_as_typed",
        "reading_mg_l",
        "target_mg_l",
        "difference_mg_l",
        "tolerance_mg_l",
        "accepted",
        "method",
        "flag_codes",
        "rounding",
    ),
    "custody": (
        "trip_id",
        "handoff_id",
        "at",
        "relinquished_by",
        "received_by",
        "at_lab",
        "bottle_id",
        "label",
        "site_id",
        "temp_on_receipt_c",
        "temp_as_typed",
        "condition",
        "relinquished_signed",
        "received_signed",
        "notes",
        "rounding",
    ),
}


@dataclass(frozen=True)
class SeasonFilter:
    """Which trips and stops a season export takes: trip start dates (inclusive, the trip's own
    calendar day), sites (stops at other sites are left out; empty: every site) and review states
    (``core.rules.review.STATES``, e.g. only "approved"; empty: every state)."""

    date_from: date | None = None
    date_to: date | None = None
    sites: tuple[str, ...] = ()
    states: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        if self.date_from and self.date_to and self.date_from > self.date_to:
            raise ValueError(f"the start date {self.date_from} is after the end date {self.date_to}")


def trip_in_season(trip: Trip, flt: SeasonFilter) -> bool:
    from core.rules.review import review_state

    day = trip.started_at.date()
    if (flt.date_from and day < flt.date_from) or (flt.date_to and day > flt.date_to):
        return False
    return not flt.states or review_state(trip) in flt.states


def _t(v: datetime | None) -> str:
    return "" if v is None else v.isoformat()


def _yes(v: bool | None) -> str:
    return "" if v is None else ("yes" if v else "no")


def _stops(trip: Trip, flt: SeasonFilter) -> list[Stop]:
    keep = {s.upper() for s in flt.sites}
    return [s for s in sorted(trip.stops, key=lambda s: s.arrived_at) if not keep or s.site_id.upper() in keep]


def season_tables(
    trips: Iterable[Trip],
    sites: dict[str, Site],
    settings: ProgramSettings,
    flt: SeasonFilter | None = None,
    *,
    full_precision: bool = False,
) -> dict[str, list[dict[str, Any]]]:
    """The five tables (:data:`TABLES`) over `trips`, filtered by `flt`, rows in trip then route order.

    Values rounded as the program's settings say (`core.rules.report.rounding_for`), or as stored
    with `full_precision`."""
    from core.rules.report import (
        bottle_rows,
        criterion_mg_l,
        finding_text,
        for_export,
        result_quantity,
        result_rows,
        rounding_for,
        rounding_note,
    )
    from core.rules.review import review_state

    rounding = None if full_precision else rounding_for(settings)
    note = rounding_note(rounding)

    def num(value: float | None, quantity: str | None) -> Any:
        return value if quantity is None else for_export(value, quantity, rounding)

    flt = flt or SeasonFilter()
    out: dict[str, list[dict[str, Any]]] = {name: [] for name in TABLES}
    for trip in sorted(trips, key=lambda t: (t.started_at, t.id)):
        if not trip_in_season(trip, flt):
            continue
        stops = _stops(trip, flt)
        if not stops:
            continue
        stop_ids = {s.id for s in stops}
        for s in stops:
            d = s.derived
            site = sites.get(s.site_id)
            out["stops"].append(
                {
                    "trip_id": trip.id,
                    "program": trip.program,
                    "crew": ";".join(trip.crew),
                    "review_state": review_state(trip),
                    "stop_id": s.id,
                    "site_id": s.site_id,
                    "site_name": site.name if site else "",
                    "arrived_at": _t(s.arrived_at),
                    "closed_at": _t(s.closed_at),
                    "water_temp_c": num(s.temp.value if s.temp else None, "temp_c"),
                    "water_temp_as_typed": s.temp.text if s.temp else "",
                    "station_pressure_hpa": num(s.pressure.value if s.pressure else None, "pressure_hpa"),
                    "station_pressure_as_typed": s.pressure.text if s.pressure else "",
                    "conductivity_us_cm": num(s.conductivity.value if s.conductivity else None, "conductivity"),
                    "conductivity_is_sc25": _yes(s.conductivity_is_sc25) if s.conductivity else "",
                    "conductivity_as_typed": s.conductivity.text if s.conductivity else "",
                    "meter_do_mg_l": num(s.do.value if s.do and s.do.unit == "mg/L" else None, "do_mg_l"),
                    "meter_do_percent": num(s.do.value if s.do and s.do.unit == "%" else None, "percent"),
                    "meter_do_as_typed": s.do.text if s.do else "",
                    "do_sat_mg_l": num(d.do_sat_mg_l if d else None, "do_mg_l"),
                    "do_mg_l": num(d.do_mg_l if d else None, "do_mg_l"),
                    "percent_saturation": num(d.percent_saturation if d else None, "percent"),
                    "salinity_pss78": num(d.salinity if d else None, "salinity"),
                    "salinity_source": d.salinity_source if d else "",
                    "specific_conductance_us_cm": num(d.specific_conductance_us_cm if d else None, "conductivity"),
                    "criterion_mg_l": criterion_mg_l(site, settings),
                    "method": d.method if d else "",
                    "core_version": d.core_version if d else "",
                    "flag_codes": ";".join(dict.fromkeys(f.code for f in d.flags)) if d else "",
                    "findings": " | ".join(dict.fromkeys(finding_text(f) for f in d.flags)) if d else "",
                    "weather": s.weather,
                    "flow": s.flow,
                    "notes": s.notes,
                    "rounding": note,
                }
            )
        for b in bottle_rows(trip, settings):
            if b.stop.id not in stop_ids:
                continue
            hours = b.holding_rule.split(" ", 1)[0] if b.deadline else ""
            out["bottles"].append(
                {
                    "trip_id": trip.id,
                    "stop_id": b.stop.id,
                    "site_id": b.stop.site_id,
                    "bottle_id": b.bottle.id,
                    "label": b.bottle.label,
                    "kind": b.bottle.kind,
                    "collected_at": _t(b.bottle.collected_at),
                    "fixed_at": _t(b.bottle.fixed_at),
                    "preservation": b.bottle.preservation,
                    "holding_hours": float(hours) if hours else None,
                    "holding_deadline": _t(b.deadline),
                    "custody_status": b.custody_status,
                    "custody_flag_codes": ";".join(dict.fromkeys(f.code for f in b.custody_flags)),
                    "notes": b.bottle.notes,
                }
            )
        for r in result_rows(trip, settings):
            if r.stop_id not in stop_ids:
                continue
            out["results"].append(
                {
                    "trip_id": trip.id,
                    "site_id": r.site_id,
                    "stop_id": r.stop_id,
                    "bottle_id": r.bottle_id,
                    "label": r.label,
                    "result_id": r.result_id,
                    "analyte": r.analyte,
                    "value": num(r.value, result_quantity(r.analyte, r.unit)),
                    "qualifier": r.qualifier,
                    "unit": r.unit,
                    "reported": r.reported,
                    "status": r.status,
                    "holding_status": r.holding,
                    "analyst": r.analyst,
                    "analysed_at": _t(r.analysed_at),
                    "method": r.method,
                    "superseded_by": r.superseded_by or "",
                    "flag_codes": ";".join(dict.fromkeys(r.flag_codes)),
                    "findings": " | ".join(r.findings),
                    "rounding": note,
                }
            )
        for cal in (trip.pre_calibration, trip.post_check):
            if cal is None:
                continue
            out["calibrations"].append(
                {
                    "trip_id": trip.id,
                    "calibration_id": cal.id,
                    "kind": cal.kind,
                    "at": _t(cal.at),
                    "temp_c": num(cal.temp.value, "temp_c"),
                    "temp_as_typed": cal.temp.text,
                    "pressure_hpa": num(cal.pressure.value, "pressure_hpa"),
                    "pressure_as_typed": cal.pressure.text,
                    "reading_mg_l": num(cal.reading_mg_l, "calibration_mg_l"),
                    "target_mg_l": num(cal.target_mg_l, "calibration_mg_l"),
                    "difference_mg_l": num(cal.difference_mg_l, "calibration_mg_l"),
                    "tolerance_mg_l": cal.tolerance_mg_l
                    if cal.tolerance_mg_l is not None
                    else settings.calibration_tolerance_mg_l,
                    "accepted": _yes(cal.accepted),
                    "method": cal.method or "",
                    "flag_codes": ";".join(f.code for f in cal.flags),
                    "rounding": note,
                }
            )
        # one row per bottle per hand-off: a bottle's chain joins the bottles table on bottle_id, and two
        # bottles with the same label stay apart
        held = {b.id: (b, s) for s in stops for b in s.bottles}
        for h in sorted(trip.custody, key=lambda h: h.at):
            for bottle_id in dict.fromkeys(h.bottle_ids):
                if bottle_id not in held:
                    continue
                bottle, stop = held[bottle_id]
                out["custody"].append(
                    {
                        "trip_id": trip.id,
                        "handoff_id": h.id,
                        "at": _t(h.at),
                        "relinquished_by": h.relinquished_by,
                        "received_by": h.received_by,
                        "at_lab": _yes(h.at_lab),
                        "bottle_id": bottle.id,
                        "label": bottle.label,
                        "site_id": stop.site_id,
                        "temp_on_receipt_c": num(h.temp.value if h.temp else None, "temp_c"),
                        "temp_as_typed": h.temp.text if h.temp else "",
                        "condition": h.condition,
                        "relinquished_signed": _yes(h.relinquished_signature is not None),
                        "received_signed": _yes(h.received_signature is not None),
                        "notes": h.notes,
                        "rounding": note,
                    }
                )
    return out


def site_series(trips: Iterable[Trip], site_id: str, flt: SeasonFilter | None = None) -> list[dict[str, Any]]:
    """Every visit to one site over the season: time, DO (mg/L), % saturation, live Winkler values."""
    from core.rules.lab import live_winkler_values, stop_do_mg_l

    flt = flt or SeasonFilter()
    rows: list[dict[str, Any]] = []
    for trip in trips:
        if not trip_in_season(trip, flt):
            continue
        for s in trip.stops:
            if s.site_id.upper() != site_id.upper():
                continue
            d = s.derived
            do_mg = stop_do_mg_l(s)
            wink = live_winkler_values(s)
            rows.append(
                {
                    "at": s.arrived_at,
                    "trip_id": trip.id,
                    "do_mg_l": do_mg,
                    "percent_saturation": d.percent_saturation if d else None,
                    "winkler_mg_l": wink,
                }
            )
    rows.sort(key=lambda r: r["at"])
    return rows
