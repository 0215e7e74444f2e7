"""Exchange: trip JSON in streamtab's documented layout, CSV exports, and site lists from CSV.

The trip JSON layout is the JSON Schema in core/records/schema/trip.schema.json. CSV exports carry the
unit in every numeric column's header (``water_temp_c``, ``station_pressure_hpa``...), round numbers by
the program's reporting rule unless asked for full precision (the ``rounding`` column says which); every
exported table goes through `csv_table` (cells a spreadsheet would run as a formula neutralised,
NUL refused).
Imports are all or nothing: a bad row or field stops the import before anything is stored.
"""

from __future__ import annotations

import csv
import io
import json
import re
from pathlib import Path
from typing import TYPE_CHECKING, Any

from pydantic import ValidationError

from core.records.limits import MAX_DOCUMENT_BYTES, LimitError, loads_limited
from core.records.messages import label_for, problems_from_validation
from core.records.models import InputError, Site, Trip, parse_number

if TYPE_CHECKING:
    from core.rules.report import Rounding

__all__ = [
    "ExchangeError",
    "SITE_COLUMNS",
    "STOP_COLUMNS",
    "COMPUTED_STOP_COLUMNS",
    "BOTTLE_COLUMNS",
    "import_sites_csv",
    "read_sites_csv",
    "import_trip_file",
    "import_trip_document",
    "read_trip_file",
    "export_trip_json",
    "export_trip_csv",
    "stop_rows",
    "bottle_rows",
    "csv_table",
    "spreadsheet_safe",
    "FORMULA_LEADS",
]


class ExchangeError(ValueError):
    """A file that cannot be imported: one line naming the file, the line or field, and the problem."""


SITE_COLUMNS = (
    "site_id",
    "name",
    "elevation_m",
    "latitude",
    "longitude",
    "water_class",
    "min_do_mg_l",
    "supersaturation_percent",
    "notes",
)
_SITE_REQUIRED = ("site_id", "name", "elevation_m")
#: Number columns: column → (its limit in the one table of limits, core.records.models.LIMITS, which the
#: Site record and the app read too; the units that may follow a number in that column).
_SITE_NUMBERS: dict[str, tuple[str, tuple[str, ...]]] = {
    "elevation_m": ("elevation", ("m",)),
    "latitude": ("latitude", ("°",)),
    "longitude": ("longitude", ("°",)),
    "min_do_mg_l": ("criterion", ("mg/L",)),
    "supersaturation_percent": ("supersaturation", ("%",)),
}
_SITE_LABELS = {"site_id": "Site code"}


def read_sites_csv(path: Path | str) -> list[Site]:
    """Parses a site list (columns :data:`SITE_COLUMNS`; the first three required) without storing it."""
    path = Path(path)
    name = path.name
    try:
        text = path.read_bytes().decode("utf-8-sig")
    except FileNotFoundError:
        raise ExchangeError(f"{path}: no such file.") from None
    except UnicodeDecodeError:
        raise ExchangeError(f"{name}: not UTF-8 text; save the site list as UTF-8 CSV.") from None
    except OSError as exc:
        raise ExchangeError(f"{path}: cannot be read ({exc.strerror or exc}).") from None
    reader = csv.DictReader(io.StringIO(text, newline=""))
    header = [h.strip() for h in (reader.fieldnames or [])]
    if not header:
        raise ExchangeError(f"{name}, line 1: the file is empty; expected a header row with {', '.join(SITE_COLUMNS)}.")
    reader.fieldnames = header
    missing = [c for c in _SITE_REQUIRED if c not in header]
    if missing:
        raise ExchangeError(
            f"{name}, line 1: missing column {', '.join(missing)}; the columns are "
            f"{', '.join(SITE_COLUMNS)} (the first three required)."
        )
    unknown = [c for c in header if c not in SITE_COLUMNS]
    if unknown:
        raise ExchangeError(
            f"{name}, line 1: unknown column {', '.join(unknown)}; the columns are {', '.join(SITE_COLUMNS)}."
        )
    sites: list[Site] = []
    seen: dict[str, int] = {}
    line = 1
    for row in reader:
        line = reader.line_num
        if None in row:
            raise ExchangeError(f"{name}, line {line}: more values than columns; check for an unquoted comma.")
        values = {k: (v or "").strip() for k, v in row.items()}
        if not any(values.values()):
            continue
        doc: dict[str, Any] = {}
        for col, raw in values.items():
            if col in _SITE_NUMBERS:
                if raw == "":
                    if col in _SITE_REQUIRED:
                        raise ExchangeError(
                            f"{name}, line {line}, column {col}: {label_for(col)} is required (metres above sea level)."
                        )
                    continue
                limit, units = _SITE_NUMBERS[col]
                try:
                    doc[col] = parse_number(raw, col, limit=limit, units=units)
                except InputError as exc:
                    raise ExchangeError(f"{name}, line {line}, column {col}: {exc.message}") from None
            elif col == "site_id":
                doc["id"] = raw
            elif col == "water_class":
                if raw:
                    doc[col] = raw.lower()
            elif raw or col in _SITE_REQUIRED:
                doc[col] = raw
        if not doc.get("id"):
            raise ExchangeError(f"{name}, line {line}, column site_id: Site code is required.")
        if doc["id"] in seen:
            raise ExchangeError(
                f"{name}, line {line}: site {doc['id']} is listed twice (first on line {seen[doc['id']]})."
            )
        seen[doc["id"]] = line
        try:
            sites.append(Site.model_validate(doc, strict=True))
        except ValidationError as exc:
            probs = problems_from_validation(exc)
            msg = probs[0].message
            if probs[0].field == "id":
                msg = msg.replace("ID", _SITE_LABELS["site_id"], 1)
            # the column as the file spells it (the record calls site_id "id")
            column = "site_id" if probs[0].field == "id" else probs[0].field
            where = f", column {column}" if column in SITE_COLUMNS else ""
            raise ExchangeError(f"{name}, line {line}{where}: {msg}") from None
    if not sites:
        raise ExchangeError(f"{name}: no sites found below the header row.")
    return sites


def import_sites_csv(store: Any, path: Path | str) -> list[Site]:
    """Imports a site list into the store, all or nothing; errors name the file and line."""
    sites = read_sites_csv(path)
    return store.save_sites(sites)


def read_trip_file(path: Path | str) -> dict[str, Any]:
    """The JSON document in a trip file (not yet validated); errors name the file and line.
    The limits of `core.records.limits` (depth, text length, list lengths) are checked here."""
    path = Path(path)
    try:
        with open(path, "rb") as fh:
            raw = fh.read(MAX_DOCUMENT_BYTES + 1)
    except FileNotFoundError:
        raise ExchangeError(f"{path}: no such file.") from None
    except OSError as exc:
        raise ExchangeError(f"{path}: cannot be read ({exc.strerror or exc}).") from None
    if len(raw) > MAX_DOCUMENT_BYTES:
        raise ExchangeError(
            f"{path.name}: larger than {MAX_DOCUMENT_BYTES // (1024 * 1024)} MiB; a trip "
            f"file is never that large, so nothing was imported."
        )
    try:
        doc = loads_limited(raw.decode("utf-8-sig"))
    except UnicodeDecodeError:
        raise ExchangeError(f"{path.name}: not UTF-8 text.") from None
    except json.JSONDecodeError as exc:
        raise ExchangeError(f"{path.name}, line {exc.lineno} column {exc.colno}: not valid JSON ({exc.msg}).") from None
    except LimitError as exc:
        raise ExchangeError(f"{path.name}: {exc}; nothing was imported.") from None
    except ValueError as exc:
        raise ExchangeError(f"{path.name}: {exc}; NaN and infinity are refused.") from None
    if not isinstance(doc, dict):
        raise ExchangeError(f"{path.name}: a trip file holds one JSON object (the trip), not a {type(doc).__name__}.")
    return doc


def import_trip_file(store: Any, path: Path | str) -> Any:
    """Imports one trip file: merged into the stored trip (never replacing it), through the
    store's save path (validated, derived; nothing half-imported).

    Returns the store's merge outcome (``.trip`` as stored, ``.result``: "new", "unchanged",
    "fast-forward" or "merged", ``.conflicts``). A file the device already holds, or an older
    one, changes nothing; a file from another device merges like a sync pull; lab results,
    calibrations, custody records and audit entries are never removed.
    """
    path = Path(path)
    return import_trip_document(store, read_trip_file(path), path.name)


def import_trip_document(store: Any, doc: dict[str, Any], name: str) -> Any:
    """Imports a trip document already read by :func:`read_trip_file` from the file `name`
    (as :func:`import_trip_file`, for a caller that checks the file before opening a store)."""
    from core.store import StoreError

    try:
        return store.merge_document(doc, f"imported from {name}")
    except StoreError as exc:
        raise ExchangeError(f"{name}: {exc}") from None


def export_trip_json(store: Any, trip_id: str) -> bytes:
    """The stored trip document as indented JSON (sorted keys, UTF-8), importable again as is."""
    doc = store.trip_document(trip_id)
    return (json.dumps(doc, indent=2, sort_keys=True, ensure_ascii=False, allow_nan=False) + "\n").encode("utf-8")


#: The stop columns the store computes (never typed; a conflict over one is settled by the inputs).
COMPUTED_STOP_COLUMNS = (
    "do_sat_mg_l",
    "do_mg_l",
    "do_percent_saturation",
    "salinity_pss78",
    "salinity_source",
    "specific_conductance_us_cm",
    "method",
    "core_version",
    "flags",
)

STOP_COLUMNS = (
    "trip_id",
    "stop_id",
    "site_id",
    "arrived_at",
    "closed_at",
    "water_temp_c",
    "water_temp_as_typed",
    "station_pressure_hpa",
    "station_pressure_as_typed",
    "conductivity_us_cm",
    "conductivity_is_sc25",
    "conductivity_as_typed",
    "meter_do_value",
    "meter_do_unit",
    "meter_do_as_typed",
    *COMPUTED_STOP_COLUMNS,
    "weather",
    "flow",
    "notes",
    "rounding",
)
BOTTLE_COLUMNS = (
    "trip_id",
    "stop_id",
    "site_id",
    "bottle_uuid",
    "bottle_id",
    "kind",
    "collected_at",
    "fixed_at",
    "preservation",
    "lab_results",
    "notes",
)


def _num(value: float | None) -> str:
    return "" if value is None else repr(float(value))


def _time(value: Any) -> str:
    return "" if value is None else value.isoformat()


def stop_rows(trip: Trip, rounding: Rounding | None = None) -> list[dict[str, str]]:
    """One row per stop (columns :data:`STOP_COLUMNS`), in route order.

    Numbers are rounded by the reporting rule (`core.rules.report.reported`) with `rounding` (a
    `core.rules.report.Rounding`), or written at full precision as stored when it is None; the
    ``rounding`` column says which. Columns ending in ``_as_typed`` keep what was typed."""
    from core.rules.report import Reported, for_export, rounding_note

    def num(value: float | None, quantity: str) -> str:
        shown = for_export(value, quantity, rounding)
        return shown.text if isinstance(shown, Reported) else _num(shown)

    note = rounding_note(rounding)
    rows = []
    for s in sorted(trip.stops, key=lambda s: s.arrived_at):
        d = s.derived
        meter_quantity = "percent" if s.do is not None and s.do.unit == "%" else "do_mg_l"
        rows.append(
            {
                "trip_id": trip.id,
                "stop_id": s.id,
                "site_id": s.site_id,
                "arrived_at": _time(s.arrived_at),
                "closed_at": _time(s.closed_at),
                "water_temp_c": num(s.temp.value if s.temp else None, "temp_c"),
                "water_temp_as_typed": s.temp.text if s.temp else "",
                "station_pressure_hpa": num(s.pressure.value if s.pressure else None, "pressure_hpa"),
                "station_pressure_as_typed": s.pressure.text if s.pressure else "",
                "conductivity_us_cm": num(s.conductivity.value if s.conductivity else None, "conductivity"),
                "conductivity_is_sc25": "yes" if s.conductivity_is_sc25 else "no",
                "conductivity_as_typed": s.conductivity.text if s.conductivity else "",
                "meter_do_value": num(s.do.value if s.do else None, meter_quantity),
                "meter_do_unit": s.do.unit if s.do else "",
                "meter_do_as_typed": s.do.text if s.do else "",
                "do_sat_mg_l": num(d.do_sat_mg_l if d else None, "do_mg_l"),
                "do_mg_l": num(d.do_mg_l if d else None, "do_mg_l"),
                "do_percent_saturation": num(d.percent_saturation if d else None, "percent"),
                "salinity_pss78": num(d.salinity if d else None, "salinity"),
                "salinity_source": d.salinity_source if d else "",
                "specific_conductance_us_cm": num(d.specific_conductance_us_cm if d else None, "conductivity"),
                "method": d.method if d else "",
                "core_version": d.core_version if d else "",
                "flags": ";".join(f.code for f in d.flags) if d else "",
                "weather": s.weather,
                "flow": s.flow,
                "notes": s.notes,
                "rounding": note,
            }
        )
    return rows


def _standing(r: Any, in_use: bool) -> str:
    """How a result stands, for a reader of the cell (core.rules.report.result_status): "" when it is
    the valid result its analysis uses."""
    from core.rules.report import result_status

    status = result_status(r)
    if status == "valid" and not in_use:
        return " (not in use: a later result of the same analysis is)"
    return "" if status == "valid" else f" ({status})"


def _lab_cell(r: Any, rounding: Rounding | None, in_use: bool = True) -> str:
    """ "analyte=value unit"; a BOD5/CBOD5 result as its 5210 B report ("bod5=< 2.0 mg/L") when it has one;
    a result that is not the valid one in use says so: "(superseded)", "(not valid)", "(not checked)"."""
    return _lab_value(r, rounding) + _standing(r, in_use)


def _lab_value(r: Any, rounding: Rounding | None) -> str:
    from core.rules.report import for_export, result_quantity

    derived = (r.inputs or {}).get("derived") if isinstance(r.inputs, dict) else None
    report = derived.get("report") if isinstance(derived, dict) else None
    if isinstance(report, dict) and isinstance(report.get("text"), str) and report["text"]:
        return f"{r.analyte}={report['text']}"
    quantity = result_quantity(r.analyte, r.unit)
    if r.value is None:
        return f"{r.analyte}=no value"
    value = r.value if quantity is None else for_export(r.value, quantity, rounding)
    return (
        f"{r.analyte}={'' if value is None else (repr(value) if isinstance(value, float) else value)} {r.unit}".strip()
    )


def bottle_rows(trip: Trip, rounding: Rounding | None = None) -> list[dict[str, str]]:
    """One row per bottle (columns :data:`BOTTLE_COLUMNS`); lab results as "analyte=value unit; ..." (in use
    first, each not in use marked),
    values rounded as in :func:`stop_rows`."""
    from core.rules.lab import current_result

    rows = []
    for s in sorted(trip.stops, key=lambda s: s.arrived_at):
        for b in s.bottles:
            # the result each analysis uses first (core.rules.lab.current_result), then the others,
            # each saying how it stands
            used = {id(current_result(b, analyte)) for analyte in {r.analyte for r in b.lab_results}}
            ordered = sorted(b.lab_results, key=lambda r: (id(r) not in used, r.status == "superseded"))
            labs = "; ".join(_lab_cell(r, rounding, id(r) in used) for r in ordered)
            rows.append(
                {
                    "trip_id": trip.id,
                    "stop_id": s.id,
                    "site_id": s.site_id,
                    "bottle_uuid": b.id,
                    "bottle_id": b.label,
                    "kind": b.kind,
                    "collected_at": _time(b.collected_at),
                    "fixed_at": _time(b.fixed_at),
                    "preservation": b.preservation,
                    "lab_results": labs,
                    "notes": b.notes,
                }
            )
    return rows


#: A cell starting with one of these is run as a formula by common spreadsheets (CSV injection).
FORMULA_LEADS = ("=", "+", "-", "@", "\t", "\r")
_PLAIN_NUMBER = re.compile(r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?")


def spreadsheet_safe(value: Any, *, where: str = "the export") -> str:
    """The text of one exported table cell, safe to open in a spreadsheet.

    A cell starting with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return is written with a
    leading apostrophe (the usual neutralisation: spreadsheets show it as text, never run it), except
    a plain number such as ``-0.35`` or ``+1e-3``, which no spreadsheet runs. A NUL character is
    refused (`ExchangeError`, one line naming `where`): spreadsheets and many readers cut the cell
    or the file there. Every table export (trip CSV, season tables) writes its cells through here.
    """
    text = "" if value is None else str(value)
    if "\x00" in text:
        raise ExchangeError(
            f"{where}: the value holds a NUL character, which exports never pass on; edit that field and export again."
        )
    if text.startswith(FORMULA_LEADS) and not _PLAIN_NUMBER.fullmatch(text):
        return "'" + text
    return text


def csv_table(columns: tuple[str, ...] | list[str], rows: list[dict[str, Any]], *, name: str = "export.csv") -> str:
    """CSV text (header row, then `rows` in `columns` order, "\\n" line ends) with every cell, the
    header included, passed through `spreadsheet_safe`; `name` names the file in a refusal."""
    buf = io.StringIO(newline="")
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow([spreadsheet_safe(c, where=f"{name}, header") for c in columns])
    for i, row in enumerate(rows, start=2):
        writer.writerow([spreadsheet_safe(row.get(c), where=f"{name}, line {i}, column {c}") for c in columns])
    return buf.getvalue()


def export_trip_csv(store: Any, trip_id: str, *, full_precision: bool = False) -> dict[str, str]:
    """CSV texts keyed by file name: ``stops.csv`` (one row per stop), ``bottles.csv`` (one per bottle).

    Numbers are rounded as the program's settings say (`core.rules.report.rounding_for`); with
    `full_precision` they are written as stored. Nothing stored is changed either way."""
    from core.rules.report import rounding_for

    trip = store.load_trip(trip_id)
    rounding = None if full_precision else rounding_for(store.settings())
    return {
        "stops.csv": csv_table(STOP_COLUMNS, stop_rows(trip, rounding), name="stops.csv"),
        "bottles.csv": csv_table(BOTTLE_COLUMNS, bottle_rows(trip, rounding), name="bottles.csv"),
    }
