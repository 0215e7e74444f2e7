"""`streamtab review list|check|approve|return|resubmit|show`: the office's review of trips in the store.

Each step is an event appended to the trip (who, when, comment, reasons) through the store's one
save path, so it syncs and merges like any other change (core.rules.review holds the states).
"""

from __future__ import annotations

import sys
from datetime import datetime, timezone
from typing import Any

from core.records.messages import when_text
from mobile.cli._common import emit_json, fail, open_store, resolve_trip_id

__all__ = ["register"]


def register(sub) -> None:  # noqa: ANN001 - argparse's private subparsers type
    from core.rules.review import STATES
    from mobile.cli._common import OneLineParser

    review = sub.add_parser("review", help="review, approve or return trips (the office)")
    verbs = review.add_subparsers(dest="review_command", required=True, parser_class=OneLineParser)

    def common(p, json: bool = True) -> None:  # noqa: ANN001
        if json:
            p.add_argument("--json", action="store_true", help="print the result as JSON")
        p.add_argument(
            "--data-dir",
            metavar="DIR",
            default=None,
            help="store folder (else $STREAMTAB_DATA, else the user data folder)",
        )

    p = verbs.add_parser("list", help="trips with their review state")
    p.add_argument("--state", choices=STATES, default=None, help="only trips in this state")
    common(p)
    p.set_defaults(handler=_list)

    for name, action, help_text in (
        ("check", "reviewed", "mark an ended trip as reviewed"),
        ("approve", "approved", "approve an ended or reviewed trip"),
        ("return", "returned", "send a trip back to its crew with reasons"),
        ("resubmit", "resubmitted", "hand a returned trip back to the office"),
    ):
        p = verbs.add_parser(name, help=help_text)
        p.add_argument("id", metavar="TRIP", help="trip id, or a unique start of it")
        p.add_argument("--by", required=True, metavar="NAME", help="who takes this step")
        if action == "returned":
            p.add_argument(
                "--reason",
                required=True,
                action="append",
                metavar="TEXT",
                help="what the crew should fix (repeat for several)",
            )
        p.add_argument("--comment", default="", metavar="TEXT", help="a note kept with the step")
        common(p)
        p.set_defaults(handler=_step, action=action)

    p = verbs.add_parser("show", help="a trip's review history (and the approved version after a correction)")
    p.add_argument("id", metavar="TRIP", help="trip id, or a unique start of it")
    p.add_argument("--approved", action="store_true", help="print the document as it was approved")
    common(p)
    p.set_defaults(handler=_show)


def _state_of(store, summary) -> str:  # noqa: ANN001
    if summary.review_state:
        return summary.review_state
    from core.rules.review import review_state

    return review_state(store.trip_document(summary.id))


def _list(args) -> int:  # noqa: ANN001
    store = open_store(args.data_dir)
    rows = []
    for s in store.list_trips():
        state = _state_of(store, s)
        if args.state and state != args.state:
            continue
        rows.append(
            {
                "id": s.id,
                "started_at": s.started_at,
                "program": s.program,
                "crew": s.crew,
                "stops": s.stop_count,
                "revision": s.revision,
                "state": state,
            }
        )
    if args.json:
        emit_json(rows)
        return 0
    if not rows:
        sys.stdout.write("no trips" + (f" {args.state}" if args.state else "") + "\n")
    for r in rows:
        sys.stdout.write(
            f"{r['id'][:8]}  {when_text(r['started_at']):<26}  {r['program'][:28]:<28}  "
            f"{','.join(r['crew'])[:14]:<14}  {r['state']}\n"
        )
    return 0


def _step(args) -> int:  # noqa: ANN001
    from core.records.models import ReviewEvent
    from core.rules.review import ReviewRefused, new_event, review_state
    from core.store import StoreError

    store = open_store(args.data_dir)
    tid = resolve_trip_id(store, args.id, "TRIP")
    what = {
        "reviewed": "reviewed",
        "approved": "approved",
        "returned": "returned to the crew",
        "resubmitted": "resubmitted",
    }[args.action]
    said: dict[str, Any] = {}

    def apply(trip):  # noqa: ANN001, ANN202 - runs under the store's lock, on the trip as stored now
        said["event"] = new_event(
            trip,
            args.action,
            by=args.by,
            at=datetime.now(timezone.utc),
            comment=args.comment,
            reasons=getattr(args, "reason", None) or (),
        )
        return trip.model_copy(
            update={"review_events": [*trip.review_events, ReviewEvent.model_validate(said["event"], strict=False)]}
        )

    try:
        saved = store.update_trip(tid, lambda: f"review: {what} by {said['event']['by']}", apply)
    except ReviewRefused as exc:
        fail(f"trip {tid[:8]}: {exc}")
    except StoreError as exc:
        fail(str(exc))
    event = said["event"]
    state = review_state(saved)
    if args.json:
        emit_json({"id": tid, "state": state, "revision": saved.revision, "event": event})
    else:
        sys.stdout.write(f"{tid[:8]}  {state} (by {event['by']}, revision {saved.revision})\n")
        for r in event["reasons"]:
            sys.stdout.write(f"    reason: {r}\n")
    return 0


def _show(args) -> int:  # noqa: ANN001
    from core.rules.review import approved_version, open_reasons, review_state

    store = open_store(args.data_dir)
    tid = resolve_trip_id(store, args.id, "TRIP")
    doc = store.trip_document(tid)
    if args.approved:
        version = approved_version(doc)
        if version is None:
            fail(
                f"trip {tid[:8]} has no correction after an approval; accepted: a corrected trip"
                " (its current version is the approved one when it is approved)."
            )
        emit_json(version)
        return 0
    events = sorted(doc.get("review_events") or [], key=lambda e: (e.get("at", ""), e.get("id", "")))
    if args.json:
        emit_json(
            {
                "id": tid,
                "state": review_state(doc),
                "reasons": open_reasons(doc),
                "events": [{k: v for k, v in e.items() if k != "approved"} for e in events],
            }
        )
        return 0
    sys.stdout.write(f"{tid}  {review_state(doc)}\n")
    for e in events:
        line = f"  {when_text(e.get('at'))}  {e.get('action'):<11} by {e.get('by')}"
        if e.get("comment"):
            line += f": {e['comment']}"
        sys.stdout.write(line + "\n")
        for r in e.get("reasons") or []:
            sys.stdout.write(f"      reason: {r}\n")
    return 0
