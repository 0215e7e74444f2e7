"""`streamtab sites import` and `streamtab trip import|list|show|export`: trips in the device store."""

from __future__ import annotations

import sys
from datetime import datetime, timezone
from pathlib import Path

from mobile.cli._common import emit_json, fail, open_store, resolve_trip_id

__all__ = ["register"]


def _command(
    group,
    name: str,
    help_text: str,
    handler,
    *,
    json: bool = False,  # noqa: ANN001
    trip_id: bool = False,
):
    """One sub-command with the options every command here shares (ID, --json, --data-dir)."""
    p = group.add_parser(name, help=help_text)
    if trip_id:
        p.add_argument("id", metavar="ID", help="trip id, or a unique start of it")
    if json:
        p.add_argument("--json", action="store_true")
    p.add_argument(
        "--data-dir",
        metavar="DIR",
        default=None,
        help="device store folder (else $STREAMTAB_DATA, else the user data folder)",
    )
    p.set_defaults(handler=handler)
    return p


def register(sub) -> None:  # noqa: ANN001 - argparse's private subparsers type
    """Adds `sites` and `trip` to the top-level parser."""
    from mobile.cli._common import OneLineParser

    sites = sub.add_parser("sites", help="the site list on this device")
    sites_sub = sites.add_subparsers(dest="sites_command", required=True, parser_class=OneLineParser)
    p = _command(sites_sub, "import", "import a site list from CSV (all rows or none)", _sites_import)
    p.add_argument("file", metavar="FILE")
    _command(sites_sub, "list", "list the sites on this device", _sites_list, json=True)

    trip = sub.add_parser("trip", help="trips in the device store")
    trip_sub = trip.add_subparsers(dest="trip_command", required=True, parser_class=OneLineParser)
    p = _command(
        trip_sub, "import", "import a trip JSON file (validated; nothing half-imported)", _trip_import, json=True
    )
    p.add_argument("file", metavar="FILE")
    _command(trip_sub, "list", "list the trips on this device", _trip_list, json=True)
    _command(trip_sub, "show", "a trip's stops with derived values and flags", _trip_show, json=True, trip_id=True)
    p = _command(trip_sub, "export", "write a trip as JSON or CSV", _trip_export, trip_id=True)
    p.add_argument("--format", choices=("json", "csv"), required=True)
    p.add_argument(
        "--out",
        metavar="PATH",
        default=None,
        help="file for json; folder for csv (stops.csv, bottles.csv); default: standard output",
    )
    p.add_argument(
        "--full-precision",
        action="store_true",
        help="csv: write values as stored instead of rounded by the program's reporting rule (for analysts);"
        " json is always as stored",
    )
    from mobile.cli.conflict_cmds import add_trip_commands

    add_trip_commands(trip_sub, _command)


def _store(args, *, create: bool = False):  # noqa: ANN001
    return open_store(args.data_dir, create=create)


def _sites_import(args) -> int:  # noqa: ANN001
    from core.records.exchange import ExchangeError, read_sites_csv
    from core.store import StoreError

    try:  # the whole file is read and checked before a store is opened (or created) for it
        sites = read_sites_csv(args.file)
    except ExchangeError as exc:
        fail(str(exc))
    store = _store(args, create=True)
    try:
        sites = store.save_sites(sites)
    except StoreError as exc:
        fail(str(exc))
    sys.stdout.write(f"imported {len(sites)} site{'s' if len(sites) != 1 else ''} from {Path(args.file).name}\n")
    return 0


def _sites_list(args) -> int:  # noqa: ANN001
    store = _store(args)
    sites = store.sites()
    if args.json:
        emit_json([s.model_dump(mode="json") for s in sites])
        return 0
    for s in sites:
        cls = s.water_class or "-"
        sys.stdout.write(f"{s.id:<8} {s.name:<24} {s.elevation_m:>7.0f} m  {cls}\n")
    return 0


def _trip_import(args) -> int:  # noqa: ANN001
    from core.records.exchange import ExchangeError, import_trip_document, read_trip_file

    try:  # a missing or unreadable file is refused before a store is opened (or created) for it
        doc = read_trip_file(args.file)
    except ExchangeError as exc:
        fail(str(exc))
    store = _store(args, create=True)
    try:
        outcome = import_trip_document(store, doc, Path(args.file).name)
    except ExchangeError as exc:
        fail(str(exc))
    trip = outcome.trip
    if args.json:
        emit_json(
            {
                "id": trip.id,
                "revision": trip.revision,
                "stop_count": len(trip.stops),
                "status": trip.status,
                "result": outcome.result,
                "new_conflicts": len(outcome.conflicts),
            }
        )
        return 0
    n = len(trip.stops)
    name = Path(args.file).name
    what = f"({n} stop{'' if n == 1 else 's'}, revision {trip.revision})"
    if outcome.result == "new":
        sys.stdout.write(f"imported trip {trip.id} {what} from {name}\n")
    elif outcome.result == "unchanged":
        sys.stdout.write(f"trip {trip.id} unchanged {what}: this device already holds everything in {name}\n")
    else:
        sys.stdout.write(f"merged {name} into trip {trip.id} {what}; nothing stored was removed\n")
    if outcome.conflicts:
        k = len(outcome.conflicts)
        sys.stdout.write(
            f"{k} field{'' if k == 1 else 's'} differ between this device and the file;"
            f" see 'streamtab trip conflicts {trip.id[:8]}'\n"
        )
    return 0


def _note_quarantine(store) -> None:  # noqa: ANN001
    moved = store.quarantined()
    if moved:
        names = ", ".join(p.name for p in moved[:5]) + (" ..." if len(moved) > 5 else "")
        sys.stderr.write(
            f"streamtab: note: {len(moved)} unreadable file{'s' if len(moved) != 1 else ''} kept in"
            f" {moved[0].parent}: {names}\n"
        )


def _trip_list(args) -> int:  # noqa: ANN001
    from core.records.messages import when_text

    store = _store(args)
    summaries = store.list_trips()
    _note_quarantine(store)
    if args.json:
        emit_json([s.to_dict() for s in summaries])
        return 0
    if not summaries:
        sys.stdout.write("no trips on this device\n")
        return 0
    for s in summaries:
        sys.stdout.write(
            f"{s.id[:8]}  {when_text(s.started_at):<26}  {s.program[:28]:<28}  "
            f"{','.join(s.crew)[:14]:<14}  {s.stop_count:>3} stop{' ' if s.stop_count == 1 else 's'}  "
            f"rev {s.revision:<3} {s.status}\n"
        )
    return 0


def _show_data(store, trip_id: str) -> dict:  # noqa: ANN001
    from core.rules.qc import TRIP_KEY, checked_site, snapshot_differences, trip_flags

    trip = store.load_trip(trip_id)
    sites = store.sites_by_id()
    settings = store.settings()
    now = datetime.now(timezone.utc)
    flags = trip_flags(trip, settings, now, other_bottle_labels=store.bottle_labels_in_use(), sites=sites)
    stops = []
    for number, stop in enumerate(sorted(trip.stops, key=lambda s: s.arrived_at), 1):
        site = checked_site(stop, sites)
        stops.append(
            {
                "number": number,
                "id": stop.id,
                "site_id": stop.site_id,
                "site_name": site.name if site else None,
                # the site facts the checks used (kept when the stop was saved) and what changed since
                "site_snapshot": stop.site_snapshot.model_dump(mode="json") if stop.site_snapshot else None,
                "site_changed_since": snapshot_differences(stop, sites.get(stop.site_id), settings),
                "arrived_at": stop.arrived_at.isoformat(),
                "closed_at": stop.closed_at.isoformat() if stop.closed_at else None,
                "inputs": {
                    name: (getattr(stop, name).model_dump(mode="json") if getattr(stop, name) else None)
                    for name in ("temp", "pressure", "conductivity", "do")
                },
                "conductivity_is_sc25": stop.conductivity_is_sc25,
                "derived": stop.derived.model_dump(mode="json", exclude={"flags"}) if stop.derived else None,
                "bottles": [
                    {"id": b.id, "label": b.label, "kind": b.kind, "collected_at": b.collected_at.isoformat()}
                    for b in stop.bottles
                ],
                "flags": [f.to_dict() for f in flags.get(stop.id, [])],
            }
        )
    cal = {}
    for key in ("pre_calibration", "post_check"):
        c = getattr(trip, key)
        cal[key] = None if c is None else c.model_dump(mode="json")
    return {
        "id": trip.id,
        "program": trip.program,
        "crew": trip.crew,
        "device_id": trip.device_id,
        "meter_id": trip.meter_id,
        "started_at": trip.started_at.isoformat(),
        "ended_at": trip.ended_at.isoformat() if trip.ended_at else None,
        "revision": trip.revision,
        "status": trip.status,
        "calibrations": cal,
        "started_without_calibration": trip.started_without_calibration,
        "trip_flags": [f.to_dict() for f in flags.get(TRIP_KEY, [])],
        "open_conflicts": [c.model_dump(mode="json") for c in trip.open_conflicts],
        "stops": stops,
    }


def _fmt(value, spec: str, unit: str) -> str:  # noqa: ANN001
    return "—" if value is None else f"{value:{spec}} {unit}"


def _trip_show(args) -> int:  # noqa: ANN001
    from core.store import StoreError

    store = _store(args)
    trip_id = resolve_trip_id(store, args.id)
    try:
        data = _show_data(store, trip_id)
    except StoreError as exc:
        fail(str(exc))
    if args.json:
        emit_json(data)
        return 0
    from core.records.messages import when_text

    w = sys.stdout.write
    w(f"trip {data['id']}  {data['program']}  crew {', '.join(data['crew']) or '—'}  status {data['status']}\n")
    w(
        f"  started {when_text(data['started_at'])}  ended {when_text(data['ended_at'])}"
        f"  meter {data['meter_id'] or '—'}"
        f"  revision {data['revision']}\n"
    )
    if data["started_without_calibration"] and not data["calibrations"]["pre_calibration"]:
        w("  pre-trip calibration: none — the trip was started without calibration\n")
    for key, label in (("pre_calibration", "pre-trip calibration"), ("post_check", "post-trip check")):
        c = data["calibrations"][key]
        if c:
            verdict = {True: "accepted", False: "NOT accepted", None: "not checked"}[c.get("accepted")]
            w(
                f"  {label}: read {c['reading_mg_l']:g} mg/L, target "
                f"{_fmt(c.get('target_mg_l'), '.2f', 'mg/L')}, {verdict}\n"
            )
    for f in data["trip_flags"]:
        w(f"  [{f['severity']}] {f['code']}: {f['message']}\n")
    if data["open_conflicts"]:
        from core.rules.conflicts import list_conflicts

        for v in list_conflicts(store.load_trip(trip_id), this_device=store.device_id):
            w(f"  [needs attention] {v.number}. {v.message}\n")
        w(f"  settle with 'streamtab trip conflicts {data['id'][:8]}' and 'streamtab trip settle'\n")
    for s in data["stops"]:
        d = s["derived"] or {}
        inp = s["inputs"]
        do = inp["do"]
        w(f"\nstop {s['number']}: {s['site_id']} {s['site_name'] or ''}  {s['arrived_at']}\n")
        if s["site_changed_since"]:
            w(
                f"  site list changed since this stop was saved; it is judged as saved: "
                f"{'; '.join(s['site_changed_since'])}\n"
            )
        w(
            f"  water {_fmt(inp['temp'] and inp['temp']['value'], '.1f', '°C')}"
            f"  pressure {_fmt(inp['pressure'] and inp['pressure']['value'], '.1f', 'hPa')}"
            f"  conductivity {_fmt(inp['conductivity'] and inp['conductivity']['value'], '.0f', 'µS/cm')}"
            f"  meter DO {_fmt(do and do['value'], 'g', do['unit'] if do else '')}\n"
        )
        if d:
            w(
                f"  saturation {d['do_sat_mg_l']:.2f} mg/L ({d['method']})"
                f"  DO {_fmt(d.get('do_mg_l'), '.2f', 'mg/L')}  {_fmt(d.get('percent_saturation'), '.0f', '%')}"
                f"  salinity {d['salinity']:.2f} ({d['salinity_source']})\n"
            )
        else:
            w("  saturation —  (needs water temperature and station pressure)\n")
        for b in s["bottles"]:
            w(f"  bottle {b['label']} ({b['kind']})\n")
        for f in s["flags"]:
            w(f"  [{f['severity']}] {f['code']}: {f['message']}\n")
    return 0


def _trip_export(args) -> int:  # noqa: ANN001
    from core.records.exchange import ExchangeError, export_trip_csv, export_trip_json
    from core.store import StoreError
    from core.store.atomic import write_export

    if args.out:
        out = Path(args.out)
        folder = out.parent
        if not folder.exists():  # a csv folder is created when missing, but never a chain of them
            fail(
                f"--out {args.out!r}: the folder {str(folder)!r} does not exist; accepted: a"
                + (" file in an existing folder" if args.format == "json" else " folder in an existing folder")
            )
    store = _store(args)
    trip_id = resolve_trip_id(store, args.id)
    try:
        if args.format == "json":
            data = export_trip_json(store, trip_id)
            if args.out:
                write_export(Path(args.out), data)
            else:
                sys.stdout.write(data.decode("utf-8"))
        else:
            files = export_trip_csv(store, trip_id, full_precision=args.full_precision)
            if args.out:
                out = Path(args.out)
                if out.exists() and not out.is_dir():
                    fail(f"--out {out}: for csv give a folder (stops.csv and bottles.csv are written there).")
                for name, text in files.items():
                    write_export(out / name, text.encode("utf-8"))
            else:
                for name, text in files.items():
                    sys.stdout.write(f"# {name}\n{text}")
    except (StoreError, ExchangeError) as exc:
        fail(str(exc))
    except BrokenPipeError:
        raise  # the reader of standard output stopped (`| head`): main() ends quietly
    except OSError as exc:
        fail(f"--out {args.out}: cannot write ({exc.strerror}).")
    return 0
