"""`streamtab trip correct|conflicts|settle` and `streamtab device name`: corrections and conflicts in words.

The rules are core.rules.conflicts; every change goes through the store's read–modify–write
(`DeviceStore.update_trip`) with the person's name (and reason) in the audit entry.
"""

from __future__ import annotations

import sys
from datetime import UTC, datetime
from typing import Any

from mobile.cli._common import emit_json, emit_table, fail, open_store, resolve_trip_id

__all__ = ["add_trip_commands", "register"]


def add_trip_commands(trip_sub: Any, command: Any) -> None:  # noqa: ANN401 - argparse's private types
    """Adds `correct`, `conflicts` and `settle` to `streamtab trip` (command: trip_cmds._command)."""
    p = command(
        trip_sub,
        "correct",
        "correct one field of a stop (the office's correction, audited with the reason)",
        _correct,
        json=True,
        trip_id=True,
    )
    p.add_argument(
        "--stop",
        required=True,
        metavar="N",
        help="the stop's number on the route (as 'trip show' lists them, 1 = first)",
    )
    p.add_argument(
        "--field",
        required=True,
        metavar="NAME",
        help="a column of the trip CSV export, e.g. water_temp_c, station_pressure_hpa, meter_do_value, notes",
    )
    p.add_argument(
        "--value",
        required=True,
        metavar="TEXT",
        help="the right value, typed as on the tablet (a bare number is read in the column's unit)",
    )
    p.add_argument("--reason", required=True, metavar="TEXT", help="why (kept in the audit)")
    p.add_argument("--by", metavar="NAME", default=None, help="who corrects it (default: this device's name)")
    command(trip_sub, "conflicts", "list a trip's open conflicts, in words", _conflicts, json=True, trip_id=True)
    p = command(
        trip_sub,
        "settle",
        "settle one conflict: keep one of its values or type the right one",
        _settle,
        json=True,
        trip_id=True,
    )
    p.add_argument("conflict", metavar="CONFLICT", help="its number in 'trip conflicts' (or the start of its id)")
    p.add_argument("--keep", metavar="N", default=None, help="keep value N as 'trip conflicts' lists them")
    p.add_argument("--value", metavar="TEXT", default=None, help="the right value, typed as on the tablet")
    p.add_argument("--by", metavar="NAME", default=None, help="who settles it (default: this device's name)")


def register(sub: Any) -> None:  # noqa: ANN401
    """Adds `streamtab device name [NAME]`."""
    from mobile.cli._common import OneLineParser

    device = sub.add_parser("device", help="this device's name (shown to people in conflicts and the audit)")
    device_sub = device.add_subparsers(dest="device_command", required=True, parser_class=OneLineParser)
    p = device_sub.add_parser("name", help="show this device's name, or set it")
    p.add_argument("name", nargs="?", metavar="NAME", help="1 to 40 characters, e.g. 'Tablet 2' or 'Lab desk'")
    p.add_argument(
        "--data-dir",
        metavar="DIR",
        default=None,
        help="device store folder (else $STREAMTAB_DATA, else the user data folder)",
    )
    p.set_defaults(handler=_device_name)


def _whole(text: str | None, option: str) -> int | None:
    if text is None:
        return None
    t = str(text).strip()
    if not t.isdigit() or int(t) < 1:
        fail(f"{option} {text!r} is not a whole number; accepted: 1, 2, 3, ...")
    return int(t)


def _who(args: Any, store: Any) -> str:  # noqa: ANN401
    by = (args.by or store.device_name or "").strip()
    if not by:
        fail(
            "--by is needed (or name this device once with 'streamtab device name NAME'); accepted: a name or initials"
        )
    return by[:80]


def _correct(args: Any) -> int:  # noqa: ANN401
    from core.rules.conflicts import ConflictError, correct
    from core.store import StoreError

    store = open_store(args.data_dir)
    trip_id = resolve_trip_id(store, args.id)
    stop = _whole(args.stop, "--stop")
    reason = " ".join(str(args.reason or "").split())
    if not reason:
        fail("--reason is empty; say why the value is corrected (it is kept in the audit)")
    by = _who(args, store)
    said: dict[str, str] = {}
    try:
        site_ids = list(store.sites_by_id())
    except StoreError as exc:
        fail(str(exc))

    def apply(trip):  # noqa: ANN001, ANN202 - runs under the store's lock
        new, said["what"] = correct(
            trip, stop, args.field, args.value, by=by, at=datetime.now(UTC), reason=reason, site_ids=site_ids
        )
        return new

    try:
        saved = store.update_trip(
            trip_id, lambda: f"correction: {said['what']} ({reason})", apply, by=by, reason=reason
        )
    except ConflictError as exc:
        fail(str(exc))
    except StoreError as exc:
        fail(f"nothing was saved: {exc}")
    findings = _stop_findings(store, saved, stop)
    if args.json:
        emit_json(
            {
                "trip_id": saved.id,
                "revision": saved.revision,
                "changed": said.get("what"),
                "by": by,
                "reason": reason,
                "flags": [f.to_dict() for f in findings],
            }
        )
        return 0
    sys.stdout.write(f"corrected {said.get('what')} — by {by}: {reason} (revision {saved.revision})\n")
    for f in findings:  # what the checks say about the stop now, as 'trip show' prints it
        sys.stdout.write(f"  [{f.severity.value}] {f.code}: {f.message}\n")
    return 0


def _stop_findings(store: Any, trip: Any, number: int) -> list:  # noqa: ANN401
    """The checks' findings on stop `number` (route order, as 'trip show' numbers them) of a saved trip."""
    from core.rules.qc import trip_flags

    route = sorted(trip.stops, key=lambda s: s.arrived_at)
    if not 1 <= number <= len(route):
        return []
    flags = trip_flags(
        trip,
        store.settings(),
        datetime.now(UTC),
        other_bottle_labels=store.bottle_labels_in_use(),
        sites=store.sites_by_id(),
    )
    return list(flags.get(route[number - 1].id, []))


def _conflicts(args: Any) -> int:  # noqa: ANN401
    from core.rules.conflicts import list_conflicts
    from core.store import StoreError

    store = open_store(args.data_dir)
    trip_id = resolve_trip_id(store, args.id)
    try:
        trip = store.load_trip(trip_id)
    except StoreError as exc:
        fail(str(exc))
    views = list_conflicts(trip, this_device=store.device_id)
    if args.json:
        emit_json([v.to_dict() for v in views])
        return 0
    if not views:
        sys.stdout.write(f"trip {trip.id[:8]}: no open conflicts\n")
        return 0
    for v in views:
        sys.stdout.write(f"{v.number}. {v.message}\n")
    sys.stdout.write(f"settle one with: streamtab trip settle {trip.id[:8]} N --keep K (or --value TEXT)\n")
    return 0


def _settle(args: Any) -> int:  # noqa: ANN401
    from core.rules.conflicts import ConflictError, list_conflicts, settle
    from core.store import StoreError

    store = open_store(args.data_dir)
    trip_id = resolve_trip_id(store, args.id)
    keep = _whole(args.keep, "--keep")
    if (keep is None) == (args.value is None):
        fail("give --keep N (one of the values 'trip conflicts' lists) or --value TEXT, one of the two")
    by = _who(args, store)
    at = datetime.now(UTC)
    said: dict[str, Any] = {}

    def apply(trip):  # noqa: ANN001, ANN202 - runs under the store's lock
        views = {v.id: v for v in list_conflicts(trip, this_device=store.device_id)}
        new = settle(trip, args.conflict, keep=keep, value=args.value, by=by, at=at)
        done = [c for c in new.conflicts if c.resolved_at is not None and c.id in views]
        said["view"] = views[done[0].id] if done else None
        return new

    def change() -> str:
        v = said.get("view")
        what = v.message if v is not None else "a conflict"
        return f"conflict settled ({'kept value ' + str(keep) if keep else 'typed value ' + str(args.value)}): {what}"

    try:
        saved = store.update_trip(trip_id, change, apply, by=by)
    except ConflictError as exc:
        fail(str(exc))
    except StoreError as exc:
        fail(f"nothing was saved: {exc}")
    left = len(saved.open_conflicts)
    if args.json:
        v = said.get("view")
        emit_json(
            {
                "trip_id": saved.id,
                "revision": saved.revision,
                "settled": v.to_dict() if v else None,
                "by": by,
                "open_conflicts": left,
                "needs_attention": left > 0,
            }
        )
        return 0
    rows = [("trip", f"{saved.id[:8]} (revision {saved.revision})"), ("settled by", by), ("open conflicts", str(left))]
    emit_table(rows)
    return 0


def _device_name(args: Any) -> int:  # noqa: ANN401
    from core.store import StoreError

    store = open_store(args.data_dir, create=args.name is not None)
    if args.name is None:
        sys.stdout.write(f"{store.device_name or '(no name set)'}\n")
        return 0
    try:
        name = store.set_device_name(args.name)
    except StoreError as exc:
        fail(str(exc))
    sys.stdout.write(f"this device is now called {name!r}\n")
    return 0
