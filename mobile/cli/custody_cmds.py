"""`streamtab custody add|list`: the chain of custody of a trip's bottles, typed at a desk (unsigned)."""

from __future__ import annotations

import sys
from datetime import datetime, timezone
from typing import Any

from core.records.messages import when_text
from mobile.cli._common import CliError, emit_json, fail, open_store, parse_time, resolve_trip_id

__all__ = ["register"]

#: Core input names → the option a person typed.
_OPTIONS = {
    "relinquished_by": "--from",
    "received_by": "--to",
    "at": "--at",
    "bottles": "--bottles",
    "temp": "--temp",
    "now": "--at",
}


def _store_and_trip(args):  # noqa: ANN001
    from core.store import StoreError

    store = open_store(args.data_dir)
    trip_id = resolve_trip_id(store, args.trip, "TRIP_ID")
    try:
        return store, store.load_trip(trip_id)
    except StoreError as exc:
        fail(str(exc))


def _temp(text: str | None):
    """--temp as typed, read by core's one grammar (a bare number is °C), or one line naming --temp."""
    from core.records.models import Quantity
    from core.science.quantities import QuantityError, read

    if text is None:
        return None
    try:
        r = read("temp", text, "--temp", default_unit="C")
    except QuantityError as exc:
        raise CliError(exc.message) from None
    return Quantity(text=r.text, entered_value=r.number, entered_unit=r.entered_unit, value=r.value, unit=r.unit)


def _labels(out) -> list[str]:  # noqa: ANN001
    """The labels of the bottles a hand-off covers, in trip order."""
    covered = set(out.record.bottle_ids)
    return [b.label for s in out.trip.stops for b in s.bottles if b.id in covered]


def _add(args) -> int:  # noqa: ANN001
    from core.rules.custody import CustodyInputError, add_handoff
    from core.store import StoreError

    now = datetime.now(timezone.utc)
    at = parse_time(args.at, "--at") or now
    temp = _temp(args.temp)
    refs = [r for r in (args.bottles or "").split(",") if r.strip()] if args.bottles is not None else None
    if args.bottles is not None and not refs:
        fail("--bottles is empty; accepted: bottle labels separated by commas, e.g. TV-0611,TV-0612")
    store = open_store(args.data_dir)
    trip_id = resolve_trip_id(store, args.trip, "TRIP_ID")
    box: dict[str, Any] = {}

    def apply(trip):  # noqa: ANN001, ANN202 - runs under the store's lock, on the trip as stored now
        box["out"] = add_handoff(
            trip,
            relinquished_by=args.from_name,
            received_by=args.to_name,
            at=at,
            now=now,
            bottle_refs=refs,
            at_lab=args.lab,
            temp=temp,
            condition=args.condition or "",
            notes=args.notes or "",
        )
        return box["out"].trip

    def change() -> str:
        out = box["out"]
        return (
            f"custody: {len(_labels(out))} bottle(s) from {out.record.relinquished_by} to {out.record.received_by}"
            + (" (lab receipt)" if out.record.at_lab else "")
            + ", typed, unsigned"
        )

    try:
        saved = store.update_trip(trip_id, change, apply)
    except CustodyInputError as exc:
        option = _OPTIONS.get(exc.field, "")
        raise CliError(f"{option}: {exc.message}" if option else exc.message) from None
    except StoreError as exc:
        fail(f"nothing was saved: {exc}")
    out = box["out"]
    labels = _labels(out)
    data = {
        "trip_id": saved.id,
        "revision": saved.revision,
        "record": out.record.model_dump(mode="json"),
        "bottles": labels,
        "signed": out.record.signed,
        "flags": [f.to_dict() for f in out.flags],
    }
    if args.json:
        emit_json(data)
        return 0
    sys.stdout.write(
        f"trip {saved.id[:8]} (revision {saved.revision}): {', '.join(labels)}\n"
        f"  {out.record.relinquished_by} → {out.record.received_by}"
        f"{' (lab receipt)' if out.record.at_lab else ''} at {when_text(out.record.at)}"
        " — typed names, unsigned\n"
    )
    for f in out.flags:
        sys.stdout.write(f"  [{f.severity.value}] {f.code}: {f.message}\n")
    return 0


def _list(args) -> int:  # noqa: ANN001
    from core.rules.custody import custody_chains

    _, trip = _store_and_trip(args)
    chains = custody_chains(trip)
    labels = {b.id: b.label for s in trip.stops for b in s.bottles}
    records = []
    for r in sorted(trip.custody, key=lambda r: r.at):
        d = r.model_dump(mode="json")
        d["bottle_labels"] = [labels.get(i, i[:8]) for i in r.bottle_ids]
        d["signed"] = r.signed
        records.append(d)
    if args.json:
        emit_json({"trip_id": trip.id, "handoffs": records, "bottles": [c.to_dict() for c in chains]})
        return 0
    if not records:
        sys.stdout.write(f"trip {trip.id[:8]}: no hand-offs recorded\n")
    for r, d in zip(sorted(trip.custody, key=lambda r: r.at), records, strict=True):
        temp = f", {r.temp.value:g} °C on receipt" if r.temp else ""
        cond = f", {r.condition}" if r.condition else ""
        signed = "signed" if r.signed else "unsigned"
        sys.stdout.write(
            f"{when_text(r.at)}  {r.relinquished_by} → {r.received_by}"
            f"{' (lab)' if r.at_lab else ''}  {', '.join(d['bottle_labels'])}{temp}{cond}"
            f"  [{signed}] {r.id[:8]}\n"
        )
    for c in chains:
        for f in c.flags:
            if f.code != "custody.unsigned":
                sys.stdout.write(f"  [{f.severity.value}] {f.code}: {f.message}\n")
    return 0


def register(sub) -> None:  # noqa: ANN001 - argparse's private subparsers type
    """Adds the `custody` command group to the top-level parser."""
    from mobile.cli._common import OneLineParser

    grp = sub.add_parser(
        "custody",
        help="chain of custody of a trip's bottles: hand-offs and the lab's receipt",
        description="Who held each bottle, from the field crew to the lab. Typed here, a"
        " hand-off is marked unsigned; the tablet records signatures. The program's"
        " SOP and local regulations decide what a gap means.",
    )
    gsub = grp.add_subparsers(dest="custody_command", required=True, parser_class=OneLineParser)

    p = gsub.add_parser("add", help="record a hand-off (typed names, unsigned)")
    p.add_argument("trip", metavar="TRIP_ID", help="trip id, or its first 8 characters")
    p.add_argument("--from", dest="from_name", metavar="NAME", required=True, help="relinquished by (name)")
    p.add_argument("--to", dest="to_name", metavar="NAME", required=True, help="received by (name)")
    p.add_argument("--at", metavar="ISO-TIME", help="when the bottles changed hands, with time zone (default: now)")
    p.add_argument("--bottles", metavar="LABEL,...", help="bottle labels handed over (default: every bottle)")
    p.add_argument("--lab", action="store_true", help="the receiver is the lab: this is the sample receipt")
    p.add_argument("--temp", metavar="TEMP", help='temperature on receipt, e.g. "4.2 C"')
    p.add_argument("--condition", metavar="TEXT", help='condition on receipt, e.g. "intact, on ice"')
    p.add_argument("--notes", metavar="TEXT", help="notes kept with the hand-off")
    p.add_argument(
        "--data-dir",
        metavar="DIR",
        default=None,
        help="device store folder (else $STREAMTAB_DATA, else the user data folder)",
    )
    p.add_argument("--json", action="store_true", help="print JSON")
    p.set_defaults(handler=_add)

    p = gsub.add_parser("list", help="the trip's hand-offs and each bottle's findings")
    p.add_argument("trip", metavar="TRIP_ID", help="trip id, or its first 8 characters")
    p.add_argument(
        "--data-dir",
        metavar="DIR",
        default=None,
        help="device store folder (else $STREAMTAB_DATA, else the user data folder)",
    )
    p.add_argument("--json", action="store_true", help="print JSON")
    p.set_defaults(handler=_list)
