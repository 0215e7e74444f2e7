"""`streamtab report`, `streamtab export season`, `streamtab plot site`: what the office files and reads."""
from __future__ import annotations

import sys
from datetime import date, datetime, timezone
from pathlib import Path

from mobile.cli._common import CliError, emit_json, fail, open_store, resolve_trip_id

__all__ = ["register"]


def _out_path(text: str, option: str, suffixes: tuple[str, ...]) -> Path:
    path = Path(text)
    if path.suffix.lower() not in suffixes:
        fail(f"{option} {text!r} must end in {' or '.join(suffixes)}; accepted: a file name such as"
             f" report{suffixes[0]}")
    if not path.parent.exists():
        fail(f"{option} {text!r}: the folder {str(path.parent)!r} does not exist; accepted: a file in an existing"
             " folder")
    return path


def _load(store, ident: str):  # noqa: ANN001
    from core.store import StoreError

    trip_id = resolve_trip_id(store, ident, "TRIP_ID")
    try:
        return store.load_trip(trip_id), store.sites_by_id(), store.settings()
    except StoreError as exc:
        fail(str(exc))


def _report(args) -> int:  # noqa: ANN001
    from core.rules.report import trip_report
    from mobile.paper.report_pdf import render_trip_report

    out = _out_path(args.out, "--out", (".pdf",))
    store = open_store(args.data_dir)
    trip, sites, settings = _load(store, args.trip)
    rep = trip_report(trip, sites, settings, datetime.now(timezone.utc))
    try:
        data = render_trip_report(rep, out)
    except OSError as exc:
        fail(f"--out {args.out!r} could not be written ({exc.strerror or exc}); accepted: a writable file")
    summary = {"trip_id": trip.id, "revision": trip.revision, "out": str(out), "bytes": len(data),
               "stops": len(rep.stops), "bottles": len(rep.bottles), "results": len(rep.results),
               "handoffs": len(rep.handoffs)}
    if args.json:
        emit_json(summary)
    else:
        sys.stdout.write(f"wrote {out} ({len(data) // 1024} KiB): trip {trip.id[:8]}, {len(rep.stops)} stops,"
                         f" {len(rep.results)} lab results, {len(rep.handoffs)} hand-offs\n")
    return 0


def _common(p) -> None:  # noqa: ANN001
    p.add_argument("--data-dir", metavar="DIR", default=None,
                   help="device store folder (else $STREAMTAB_DATA, else the user data folder)")
    p.add_argument("--json", action="store_true", help="print a JSON summary")


def register(sub) -> None:  # noqa: ANN001 - argparse's private subparsers type
    """Adds `report`, `export` and `plot` to the top-level parser."""
    p = sub.add_parser("report", help="the trip report as a PDF: field sheet, lab results, chain of custody, a plot",
                       description="Prints a trip's report to a PDF for filing. Informs only: the program's SOP"
                                   " and local regulations decide.")
    p.add_argument("trip", metavar="TRIP_ID", help="trip id, or its first 8 characters")
    p.add_argument("--out", metavar="FILE.pdf", required=True, help="where to write the PDF")
    _common(p)
    p.set_defaults(handler=_report)
