"""`streamtab report`, `streamtab export season`, `streamtab plot site`: what the office files and reads."""

from __future__ import annotations

import sys
from datetime import date, datetime, timezone
from pathlib import Path

from mobile.cli._common import CliError, emit_json, fail, open_store, resolve_trip_id

__all__ = ["register"]


def _out_path(text: str, option: str, suffixes: tuple[str, ...], example: str) -> Path:
    path = Path(text)
    if path.suffix.lower() not in suffixes:
        fail(f"{option} {text!r} must end in {' or '.join(suffixes)}; accepted: a file name such as {example}")
    if not path.parent.exists():
        fail(
            f"{option} {text!r}: the folder {str(path.parent)!r} does not exist; accepted: a file in an existing folder"
        )
    return path


def _count(n: int, noun: str) -> str:
    return f"{n} {noun}{'' if n == 1 else 's'}"


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

    out = _out_path(args.out, "--out", (".pdf",), "report.pdf")
    store = open_store(args.data_dir)
    trip, sites, settings = _load(store, args.trip)
    rep = trip_report(trip, sites, settings, datetime.now(timezone.utc))
    try:
        data = render_trip_report(rep, out)
    except OSError as exc:
        fail(f"--out {args.out!r} could not be written ({exc.strerror or exc}); accepted: a writable file")
    summary = {
        "trip_id": trip.id,
        "revision": trip.revision,
        "out": str(out),
        "bytes": len(data),
        "stops": len(rep.stops),
        "bottles": len(rep.bottles),
        "results": len(rep.results),
        "handoffs": len(rep.handoffs),
    }
    if args.json:
        emit_json(summary)
    else:
        sys.stdout.write(
            f"wrote {out} ({len(data) // 1024} KiB): trip {trip.id[:8]}, {_count(len(rep.stops), 'stop')},"
            f" {_count(len(rep.results), 'lab result')}, {_count(len(rep.handoffs), 'hand-off')}\n"
        )
    return 0


def _date(text: str | None, option: str) -> date | None:
    if text is None:
        return None
    try:
        return date.fromisoformat(text.strip())
    except ValueError:
        raise CliError(f"{option} {text!r} is not a date; accepted: YYYY-MM-DD, e.g. 2026-06-01") from None


def _season_filter(args, sites=()):  # noqa: ANN001
    from core.rules.season import SeasonFilter

    start, end = _date(args.date_from, "--from"), _date(args.date_to, "--to")
    if start and end and start > end:
        fail(f"--from {start} is after --to {end}; accepted: a start date on or before the end date")
    return SeasonFilter(start, end, tuple(sites), tuple(getattr(args, "state", None) or ()))


def _walk_trips(store, flt, what: str):  # noqa: ANN001
    """Every trip of the store in the season, with a progress bar on a terminal; unreadable trips skipped."""
    from tqdm import tqdm

    from core.store import StoreError

    summaries = store.list_trips()
    trips, skipped = [], []
    for s in tqdm(summaries, desc=what, unit="trip", disable=None, file=sys.stderr, leave=False):
        day = str(s.started_at)[:10]
        if (flt.date_from and day < flt.date_from.isoformat()) or (flt.date_to and day > flt.date_to.isoformat()):
            continue
        try:
            trips.append(store.load_trip(s.id))
        except StoreError as exc:
            skipped.append({"trip_id": s.id, "reason": str(exc)})
            sys.stderr.write(f"streamtab: skipped trip {s.id[:8]}: {exc}\n")
    return trips, skipped


def _export_season(args) -> int:  # noqa: ANN001
    from core.records.exchange import ExchangeError
    from core.rules.season import season_tables, trip_in_season
    from core.store import StoreError
    from mobile.paper.season import write_csv_tables, write_workbook

    out = Path(args.out)
    if out.exists() and not out.is_dir():
        fail(f"--out {args.out!r} is a file; accepted: a folder (created when missing)")
    if not out.parent.exists():
        fail(
            f"--out {args.out!r}: the folder {str(out.parent)!r} does not exist; accepted: a folder in an existing"
            " folder"
        )
    flt = _season_filter(args, args.site or ())
    store = open_store(args.data_dir)
    try:
        sites, settings = store.sites_by_id(), store.settings()
    except StoreError as exc:
        fail(str(exc))
    unknown = [s for s in flt.sites if s.upper() not in {k.upper() for k in sites}]
    if unknown and sites:
        fail(f"--site {unknown[0]!r} is not in the site list; accepted: one of {', '.join(sorted(sites))}")
    trips, skipped = _walk_trips(store, flt, "reading trips")
    trips = [t for t in trips if trip_in_season(t, flt)]  # the dates, and the review states asked for
    tables = season_tables(trips, sites, settings, flt, full_precision=args.full_precision)
    try:
        files = write_csv_tables(tables, out)
        if args.xlsx:
            files.append(write_workbook(tables, out / "season.xlsx"))
    except ExchangeError as exc:
        fail(str(exc))
    except OSError as exc:
        fail(f"--out {args.out!r} could not be written ({exc.strerror or exc}); accepted: a writable folder")
    counts = {name: len(rows) for name, rows in tables.items()}
    if args.json:
        emit_json(
            {"out": str(out), "files": [str(f) for f in files], "trips": len(trips), "rows": counts, "skipped": skipped}
        )
    else:
        sys.stdout.write(
            f"wrote {len(files)} files to {out}: "
            + ", ".join(f"{k}.csv {_count(n, 'row')}" for k, n in counts.items())
            + f" from {len(trips)} trip{'' if len(trips) == 1 else 's'}\n"
        )
    return 0


def _plot_site(args) -> int:  # noqa: ANN001
    from core.rules.report import criterion_mg_l
    from core.rules.season import site_series
    from core.store import StoreError
    from mobile.paper.plots import figure_bytes, site_season_figure

    out = _out_path(args.out, "--out", (".png", ".pdf"), "site-season.png")
    flt = _season_filter(args)
    store = open_store(args.data_dir)
    try:
        sites, settings = store.sites_by_id(), store.settings()
    except StoreError as exc:
        fail(str(exc))
    match = [k for k in sites if k.upper() == args.site.strip().upper()]
    if sites and not match:
        fail(f"SITE {args.site!r} is not in the site list; accepted: one of {', '.join(sorted(sites))}")
    site = sites.get(match[0]) if match else None
    site_id = match[0] if match else args.site.strip()
    trips, _ = _walk_trips(store, flt, "reading trips")
    rows = site_series(trips, site_id, flt)
    if not rows:
        fail(
            f"SITE {site_id}: no visits in the store for these dates; accepted: a site with visits (see"
            " 'streamtab trip list')"
        )
    supersat = (
        site.supersaturation_percent if site and site.supersaturation_percent else settings.supersaturation_percent
    )
    fig = site_season_figure(
        rows,
        site_id=site_id,
        site_name=site.name if site else "",
        criterion_mg_l=criterion_mg_l(site, settings),
        supersat_percent=supersat,
    )
    from core.store.atomic import write_export

    try:
        write_export(out, figure_bytes(fig, out.suffix.lower().lstrip(".")))
    except OSError as exc:
        fail(f"--out {args.out!r} could not be written ({exc.strerror or exc}); accepted: a writable file")
    if args.json:
        emit_json(
            {
                "out": str(out),
                "site_id": site_id,
                "visits": len(rows),
                "winkler_points": sum(len(r["winkler_mg_l"]) for r in rows),
            }
        )
    else:
        sys.stdout.write(f"wrote {out}: {site_id}, {_count(len(rows), 'visit')}\n")
    return 0


def _common(p) -> None:  # noqa: ANN001
    p.add_argument(
        "--data-dir",
        metavar="DIR",
        default=None,
        help="device store folder (else $STREAMTAB_DATA, else the user data folder)",
    )
    p.add_argument("--json", action="store_true", help="print a JSON summary")


def register(sub) -> None:  # noqa: ANN001 - argparse's private subparsers type
    """Adds `report`, `export` and `plot` to the top-level parser."""
    from core.rules.review import STATES as REVIEW_STATES

    p = sub.add_parser(
        "report",
        help="the trip report as a PDF: field sheet, lab results, chain of custody, a plot",
        description="Prints a trip's report to a PDF for filing. Informs only: the program's SOP"
        " and local regulations decide.",
    )
    p.add_argument("trip", metavar="TRIP_ID", help="trip id, or its first 8 characters")
    p.add_argument("--out", metavar="FILE.pdf", required=True, help="where to write the PDF")
    _common(p)
    p.set_defaults(handler=_report)

    from mobile.cli._common import OneLineParser

    ex = sub.add_parser("export", help="office tables across many trips (CSV, or an .xlsx workbook)")
    ex_sub = ex.add_subparsers(dest="export_command", required=True, parser_class=OneLineParser)
    p = ex_sub.add_parser(
        "season",
        help="tidy tables over a season: stops, bottles, results, calibrations, custody",
        description="Writes stops.csv, bottles.csv, results.csv, calibrations.csv and custody.csv"
        " (one row per observation, units in the column names) into a folder. Values are rounded as the"
        " program's settings say (DO 0.1 mg/L, saturation 1 %%, temperature 0.1 °C, conductivity 3"
        " significant figures unless the program sets otherwise); --full-precision writes them as stored."
        " A rounding column names the convention. Cells a spreadsheet would run as a formula are neutralised.",
    )
    p.add_argument("--from", dest="date_from", metavar="DATE", help="first trip date, YYYY-MM-DD")
    p.add_argument("--to", dest="date_to", metavar="DATE", help="last trip date, YYYY-MM-DD")
    p.add_argument("--site", metavar="ID", action="append", help="only stops at this site (repeat for more)")
    p.add_argument(
        "--state",
        action="append",
        choices=REVIEW_STATES,
        metavar="STATE",
        help=f"only trips in this review state, e.g. approved (repeat for more; one of: {', '.join(REVIEW_STATES)})",
    )
    p.add_argument("--out", metavar="DIR", required=True, help="folder for the tables (created when missing)")
    p.add_argument("--xlsx", action="store_true", help="also write the tables as one workbook, season.xlsx")
    p.add_argument(
        "--full-precision",
        action="store_true",
        help="write values as stored instead of rounded by the program's reporting rule (for analysts)",
    )
    _common(p)
    p.set_defaults(handler=_export_season)

    pl = sub.add_parser("plot", help="plots for the office")
    pl_sub = pl.add_subparsers(dest="plot_command", required=True, parser_class=OneLineParser)
    p = pl_sub.add_parser(
        "site",
        help="DO and %% saturation over a season at one site, with criterion lines",
        description="Meter DO and %% saturation at one site over the season, the site's DO"
        " criterion and supersaturation threshold, and the lab's Winkler DO beside"
        " the meter readings. Readable in grey scale.",
    )
    p.add_argument("site", metavar="SITE", help="site id, e.g. LK-01")
    p.add_argument("--from", dest="date_from", metavar="DATE", help="first trip date, YYYY-MM-DD")
    p.add_argument("--to", dest="date_to", metavar="DATE", help="last trip date, YYYY-MM-DD")
    p.add_argument("--out", metavar="FILE", required=True, help="FILE.png or FILE.pdf")
    _common(p)
    p.set_defaults(handler=_plot_site)
