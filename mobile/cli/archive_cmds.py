"""`streamtab archive load|summary`: the office archive in PostgreSQL (see sync.archive)."""

from __future__ import annotations

import sys
from typing import Any

from mobile.cli._common import EXIT_OK, emit_json, fail, open_store

__all__ = ["register"]

_DB_HELP = (
    "PostgreSQL URL or key=value string, without a password (libpq: the password comes from "
    "~/.pgpass or $PGPASSFILE, mode 600, or a service file); default $STREAMTAB_ARCHIVE_DB, "
    "then the PG* environment"
)


def register(sub) -> None:  # noqa: ANN001 - argparse's private subparsers type
    from mobile.cli._common import OneLineParser

    p = sub.add_parser("archive", help="the office archive in PostgreSQL")
    verbs = p.add_subparsers(dest="archive_command", required=True, parser_class=OneLineParser)

    load = verbs.add_parser("load", help="load every trip, site and setting into the archive (only what changed)")
    load.add_argument(
        "--from",
        dest="source",
        metavar="HUB",
        default=None,
        help="pull this hub (folder or WebDAV) into the office store first, then load",
    )
    load.add_argument(
        "--data-dir",
        metavar="DIR",
        default=None,
        help="the office store to load (and to pull into with --from); else $STREAMTAB_DATA, else the user data folder",
    )
    load.add_argument("--db", metavar="URL", default=None, help=_DB_HELP)
    load.add_argument("--json", action="store_true", help="print the result as JSON")
    load.set_defaults(handler=_load)

    summary = verbs.add_parser("summary", help="per site and season: visits, minimum DO, visits below criterion")
    summary.add_argument("--db", metavar="URL", default=None, help=_DB_HELP)
    summary.add_argument("--season", type=_season, default=None, metavar="YEAR", help="one season (year)")
    summary.add_argument("--site", default=None, metavar="ID", help="one site id")
    summary.add_argument("--json", action="store_true", help="print the result as JSON")
    summary.set_defaults(handler=_summary)


def _season(text: str) -> int:
    import argparse

    try:
        year = int(text)
    except ValueError:
        year = 0
    if not 1900 <= year <= 2200:
        raise argparse.ArgumentTypeError(f"--season {text!r} is not a year; accepted: a year such as 2026")
    return year


def _load(args: Any) -> int:
    import sync
    import sync.archive as archive
    from mobile.cli.sync_cmds import _Bar, hub_before_creating

    if args.source:
        hub_before_creating(args.data_dir, args.source, 30.0)
    store = open_store(args.data_dir, create=bool(args.source))  # --from pulls: it may start the office store
    pulled = None
    if args.source:
        from sync.errors import FinalError, RetryableError

        bar = _Bar("pull")
        try:
            pulled = sync.pull(store, args.source, progress=bar)
        except FinalError as exc:
            fail(str(exc))
        except RetryableError as exc:
            fail(
                f"--from {args.source}: the hub did not answer ({exc}); try again later, or load the "
                "office store as it is with --data-dir alone."
            )
        finally:
            bar.finish()
    bar = _Bar("load")
    try:
        report = archive.load(store, args.db, progress=bar)
    except archive.ArchiveError as exc:
        fail(str(exc))
    finally:
        bar.finish()
    out = report.to_dict()
    out.pop("loaded_ids")
    if pulled is not None:
        out["pull"] = {k: v for k, v in pulled.to_dict().items() if k != "per_trip"}
    if args.json:
        emit_json(out)
        return EXIT_OK
    if pulled is not None:
        sys.stdout.write(
            f"pulled from {pulled.source}: {pulled.pulled} new, {pulled.merged} merged, "
            f"{pulled.quarantined} quarantined\n"
        )
    schema = (
        f"schema {report.schema_from} -> {report.schema_to}"
        if report.schema_from != report.schema_to
        else f"schema {report.schema_to}"
    )
    checked = (
        f"{report.unchanged} unchanged"
        if report.checked == "all"
        else "only trips saved since the last load were checked"
    )
    sys.stdout.write(
        f"archive {report.database}: {report.loaded} trip(s) loaded ({checked}); "
        f"{report.sites_written} site(s) and {report.settings_written} setting(s) written; {schema}\n"
    )
    return EXIT_OK


def _summary(args: Any) -> int:
    import sync.archive as archive

    try:
        rows = archive.season_summary(args.db, season=args.season, site=args.site)
    except archive.ArchiveError as exc:
        fail(str(exc))
    if args.json:
        emit_json(rows)
        return EXIT_OK
    if not rows:
        sys.stdout.write(
            "no visits in the archive"
            + (f" in {args.season}" if args.season else "")
            + (f" at {args.site}" if args.site else "")
            + "\n"
        )
        return EXIT_OK
    sys.stdout.write(
        f"{'season':<6}  {'site':<8} {'name':<22} {'visits':>6} {'min DO mg/L':>11} "
        f"{'below':>5} {'criterion mg/L':>14}\n"
    )
    for r in rows:
        low = "-" if r["min_do_mg_l"] is None else f"{r['min_do_mg_l']:.2f}"
        crit = "-" if r["criterion_mg_l"] is None else f"{r['criterion_mg_l']:.1f}"
        sys.stdout.write(
            f"{r['season']:<6}  {r['site_id']:<8} {(r['site_name'] or '')[:22]:<22} "
            f"{r['visits']:>6} {low:>11} {r['visits_below_criterion']:>5} {crit:>14}\n"
        )
    return EXIT_OK
