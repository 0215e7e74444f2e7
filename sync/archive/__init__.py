"""The office archive in PostgreSQL: every trip, site and setting of a store as relational rows.

``load(store, db)`` brings the archive up to date with a store (an office store filled by
``sync.pull``): the schema is migrated first (`sync.archive.schema`), then only the trips whose
content hash differs from the archived one are rewritten: per batch, one transaction deletes those
trips' rows (cascading to stops, bottles, results, ...) and COPYs their new rows. A second load of
the same store writes nothing. ``season_summary(db, season=, site=)`` reads the
``site_season_summary`` view.

Connections follow libpq's conventions: ``db`` is a ``postgresql://`` URL or a ``key=value``
string, and anything it leaves out (host, user, database, password) comes from the ``PG*``
environment, a service file (``PGSERVICEFILE``, ``~/.pg_service.conf``) or the password file
(``PGPASSFILE``, ``~/.pgpass``). A password inside ``db`` is refused (it would end up in shell
history and process lists), and so is a password or service file that others may read. Messages
name the database by host and name only, never its password.
"""

from __future__ import annotations

import os
import stat
from collections.abc import Callable, Iterable
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

from core.store.atomic import content_hash
from sync.archive.rows import COLUMNS, TRIP_TABLES, settings_row, site_row, trip_rows
from sync.archive.schema import LATEST, MIGRATIONS, STATS_SELECT

__all__ = [
    "ArchiveError",
    "LoadReport",
    "connect",
    "describe",
    "migrate",
    "schema_version",
    "load",
    "season_summary",
    "ENV_DB",
]

#: Environment variable naming the archive when --db is not given.
ENV_DB = "STREAMTAB_ARCHIVE_DB"
#: A load compares every trip with the archive at least this often (s); in between it reads only
#: the store's change feed (DeviceStore.changes_since), which a crash may have cut short.
FULL_CHECK_AFTER_S = 24 * 3600
#: Trips written per transaction on a bulk load.
BATCH = 500
_LOCK_KEY = 0x5354_4152  # advisory lock: one load at a time per database

Progress = Callable[[int, int, str, str], None]


class ArchiveError(Exception):
    """A problem a person can fix (connection, credentials, options); one sentence."""


@dataclass
class LoadReport:
    loaded: int = 0
    unchanged: int = 0
    sites_written: int = 0
    settings_written: int = 0
    schema_from: int = 0
    schema_to: int = LATEST
    database: str = ""
    checked: str = "all"  # "all": every trip against the archive; "feed": the store's saves since the last load
    loaded_ids: list[str] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


# --- connections ---------------------------------------------------------------------------------
def _conninfo_dict(db: str) -> dict[str, str]:
    import psycopg
    from psycopg.conninfo import conninfo_to_dict

    try:
        return {k: str(v) for k, v in conninfo_to_dict(db).items()}
    except (ValueError, TypeError, psycopg.Error):  # its text may quote the string: not shown
        raise ArchiveError(
            "--db is not a PostgreSQL connection URL or key=value string; accepted: "
            "postgresql://USER@HOST/DBNAME or 'host=... dbname=...'"
        ) from None


def describe(db: str) -> str:
    """The database as a person may see it: user@host/dbname, never a password."""
    try:
        d = _conninfo_dict(db)
    except ArchiveError:
        return "the database given with --db"
    host = d.get("host") or os.environ.get("PGHOST") or "local socket"
    name = d.get("dbname") or os.environ.get("PGDATABASE") or d.get("user") or os.environ.get("PGUSER") or ""
    user = d.get("user") or os.environ.get("PGUSER")
    return f"{user + '@' if user else ''}{host}/{name}"


def _private(path: Path, what: str, env: str) -> None:
    try:
        st = path.stat()
    except OSError:
        return
    if stat.S_IMODE(st.st_mode) & 0o077:
        raise ArchiveError(
            f"{what} {path} may be read by others (mode {stat.S_IMODE(st.st_mode):o}); "
            f"run 'chmod 600 {path}' ({env} names another file)."
        )


def _check_secrets(d: dict[str, str]) -> None:
    if "password" in d:
        raise ArchiveError(
            "--db carries a password; remove it and put the password in the password file "
            "(~/.pgpass or $PGPASSFILE, mode 600) or a service file instead."
        )
    home = Path(os.path.expanduser("~"))
    _private(
        Path(d.get("passfile") or os.environ.get("PGPASSFILE") or home / ".pgpass"), "the password file", "PGPASSFILE"
    )
    _private(Path(os.environ.get("PGSERVICEFILE") or home / ".pg_service.conf"), "the service file", "PGSERVICEFILE")


def connect(db: str | None):
    """An open psycopg connection to the archive named by `db` (else $STREAMTAB_ARCHIVE_DB, else
    the libpq environment). Raises ArchiveError."""
    import psycopg

    db = db if db is not None else os.environ.get(ENV_DB, "")
    d = _conninfo_dict(db)
    _check_secrets(d)
    try:
        return psycopg.connect(
            db, connect_timeout=int(d.get("connect_timeout") or 10), application_name="streamtab-archive"
        )
    except psycopg.OperationalError as exc:
        first = " ".join(str(exc).split()) or "no answer"  # libpq's lines and tabs as one line
        raise ArchiveError(
            f"cannot connect to the archive {describe(db)} ({first}); check --db, the server and the password file."
        ) from None


# --- schema ----------------------------------------------------------------------------------------
def schema_version(conn) -> int:  # noqa: ANN001
    """The archive's schema version; 0 for an empty database."""
    exists = conn.execute("SELECT to_regclass('archive_schema') IS NOT NULL").fetchone()[0]
    if not exists:
        return 0
    return int(conn.execute("SELECT COALESCE(max(version), 0) FROM archive_schema").fetchone()[0])


def migrate(conn, *, upto: int = LATEST) -> tuple[int, int]:  # noqa: ANN001
    """Applies the migrations the database lacks, each in its own transaction; returns (from, to).
    A database newer than this build is refused. An archive already at `upto` costs one read
    (a version is committed together with its migration, so it needs no lock to be read)."""
    with conn.transaction():
        start = schema_version(conn)
    if start == upto:
        return start, start
    with conn.transaction():
        conn.execute("SELECT pg_advisory_xact_lock(%s)", (_LOCK_KEY,))
        start = schema_version(conn)
    if start > LATEST:
        raise ArchiveError(
            f"the archive's schema is version {start}, newer than this build's {LATEST}; "
            "update streamtab before loading into it."
        )
    version = start
    for v, description, sql in MIGRATIONS:
        if v <= version or v > upto:
            continue
        with conn.transaction():
            conn.execute("SELECT pg_advisory_xact_lock(%s)", (_LOCK_KEY,))
            if schema_version(conn) >= v:  # another load applied it meanwhile
                continue
            conn.execute(sql)
            conn.execute("INSERT INTO archive_schema (version, description) VALUES (%s, %s)", (v, description))
        version = v
    return start, version


# --- load ------------------------------------------------------------------------------------------
def _copy(cur, table: str, rows: Iterable[tuple]) -> None:  # noqa: ANN001
    cols = COLUMNS[table]
    with cur.copy(f"COPY {table} ({', '.join(cols)}) FROM STDIN") as cp:
        for row in rows:
            cp.write_row(row)


def _upsert(conn, table: str, key: str, rows: list[tuple]) -> None:  # noqa: ANN001
    cols = list(_SIMPLE_COLUMNS[table])
    sets = ", ".join(f"{c} = EXCLUDED.{c}" for c in cols if c != key)
    sql = (
        f"INSERT INTO {table} ({', '.join(cols)}) VALUES ({', '.join(['%s'] * len(cols))}) "
        f"ON CONFLICT ({key}) DO UPDATE SET {sets}"
    )
    with conn.cursor() as cur:
        cur.executemany(sql, rows)


_SIMPLE_COLUMNS = {
    "sites": (
        "site_id",
        "name",
        "elevation_m",
        "latitude",
        "longitude",
        "water_class",
        "min_do_mg_l",
        "supersaturation_percent",
        "notes",
        "content_hash",
    ),
    "settings": (
        "program",
        "method",
        "warm_min_mg_l",
        "cold_min_mg_l",
        "supersaturation_percent",
        "hypoxic_mg_l",
        "calibration_tolerance_mg_l",
        "document",
        "content_hash",
    ),
}


def _load_reference(conn, store: Any, report: LoadReport) -> None:  # noqa: ANN001
    sites = [s.model_dump(mode="json") for s in store.sites()]
    have = dict(conn.execute("SELECT site_id, content_hash FROM sites").fetchall())
    changed = [site_row(s, content_hash(s)) for s in sites if have.get(s["id"]) != content_hash(s)]
    settings = store.settings().model_dump(mode="json")
    h = content_hash(settings)
    have_settings = dict(conn.execute("SELECT program, content_hash FROM settings").fetchall())
    with conn.transaction():
        if changed:
            _upsert(conn, "sites", "site_id", changed)
        if have_settings.get(settings.get("program") or "") != h:
            _upsert(conn, "settings", "program", [settings_row(settings, h)])
            report.settings_written = 1
        if changed or report.settings_written:  # criteria may have moved: every visit again
            with conn.cursor() as cur:
                _recompute_stats(cur, None)
    report.sites_written = len(changed)


# --- the season summary table ------------------------------------------------------------------------
_NONE = (0, 0, None, 0, None)


def _contributions(cur, trip_ids: list[str]) -> dict[tuple[str, int], tuple]:  # noqa: ANN001
    cur.execute(STATS_SELECT.format(where="trip_id = ANY(%s)"), (trip_ids,))
    return {(r[0], r[1]): tuple(r[2:]) for r in cur.fetchall()}


def _recompute_stats(cur, pairs: list[tuple[str, int]] | None) -> None:  # noqa: ANN001
    """Recomputes the summary rows of `pairs` (site, season) from the stops, or all of them."""
    if pairs is None:
        cur.execute("DELETE FROM site_season_stats")
        cur.execute("INSERT INTO site_season_stats " + STATS_SELECT.format(where="true"))
        return
    for site, season in pairs:
        cur.execute("DELETE FROM site_season_stats WHERE site_id = %s AND season = %s", (site, season))
        cur.execute(
            "INSERT INTO site_season_stats " + STATS_SELECT.format(where="site_id = %(site)s AND season = %(season)s"),
            {"site": site, "season": season},
        )


def _apply_stats(cur, old: dict, new: dict) -> None:  # noqa: ANN001
    """Moves the summary from the rewritten trips' old contributions to their new ones."""
    pairs = sorted(set(old) | set(new))
    if not pairs:
        return
    cur.execute(
        "SELECT site_id, season, visits, visits_with_do, min_do_mg_l, visits_below_criterion, "
        "criterion_mg_l FROM site_season_stats WHERE (site_id, season) IN "
        "(SELECT * FROM unnest(%s::text[], %s::int[]))",
        ([p[0] for p in pairs], [p[1] for p in pairs]),
    )
    current = {(r[0], r[1]): tuple(r[2:]) for r in cur.fetchall()}
    redo, rows, gone = [], [], []
    for pair in pairs:
        c, o, n = current.get(pair, _NONE), old.get(pair, _NONE), new.get(pair, _NONE)
        if o[2] is not None and (c[2] is None or o[2] <= c[2]) and (n[2] is None or n[2] > o[2]):
            redo.append(pair)  # a rewritten trip held the minimum and gave it up: count again
            continue
        visits = c[0] - o[0] + n[0]
        if visits <= 0:
            gone.append(pair)
            continue
        low = min((v for v in (c[2], n[2]) if v is not None), default=None)
        crit = n[4] if n[4] is not None else c[4]
        rows.append((pair[0], pair[1], visits, c[1] - o[1] + n[1], low, c[3] - o[3] + n[3], crit))
    for site, season in gone:
        cur.execute("DELETE FROM site_season_stats WHERE site_id = %s AND season = %s", (site, season))
    if rows:
        cur.executemany(
            "INSERT INTO site_season_stats VALUES (%s, %s, %s, %s, %s, %s, %s) "
            "ON CONFLICT (site_id, season) DO UPDATE SET visits = EXCLUDED.visits, "
            "visits_with_do = EXCLUDED.visits_with_do, min_do_mg_l = EXCLUDED.min_do_mg_l, "
            "visits_below_criterion = EXCLUDED.visits_below_criterion, "
            "criterion_mg_l = EXCLUDED.criterion_mg_l",
            rows,
        )
    _recompute_stats(cur, redo)


def load(store: Any, db: str | None, *, progress: Progress | None = None, batch: int = BATCH) -> LoadReport:
    """Brings the archive up to date with `store` (see the module docstring); returns what it did."""
    import psycopg

    report = LoadReport(database=describe(db if db is not None else os.environ.get(ENV_DB, "")))
    with connect(db) as conn:
        try:
            report.schema_from, report.schema_to = migrate(conn)
            conn.execute("SELECT pg_advisory_lock(%s)", (_LOCK_KEY,))
            conn.commit()
            _load_reference(conn, store, report)
            source = str(Path(store.data_dir).resolve())
            row = conn.execute(
                "SELECT log_inode, log_offset, full_at > now() - make_interval(secs => %s) "
                "FROM load_sources WHERE source = %s",
                (FULL_CHECK_AFTER_S, source),
            ).fetchone()
            feed = getattr(store, "changes_since", None)
            changed, mark = feed((row[0], row[1]) if row and row[2] else None) if feed is not None else (None, None)
            if changed is None:  # every trip against the archive (first load, or a day since)
                report.checked = "all"
                archived = dict(conn.execute("SELECT trip_id, content_hash FROM trips").fetchall())
                summaries = store.list_trips()
                todo = [s.id for s in sorted(summaries, key=lambda s: s.id) if archived.get(s.id) != s.content_hash]
                report.unchanged = len(summaries) - len(todo)
            else:  # only the trips the store saved since the last load
                report.checked = "feed"
                archived = dict(
                    conn.execute(
                        "SELECT trip_id, content_hash FROM trips WHERE trip_id = ANY(%s)", (changed,)
                    ).fetchall()
                )
                todo = [t for t in changed if store.has_trip(t)]
            conn.commit()
            # where the store's change feed was read up to: written in the transaction of the last
            # batch that writes trips (one commit, and the mark never runs ahead of the rows), on
            # its own when no trip was written, and not at all when nothing moved
            mark_sql = (
                "INSERT INTO load_sources (source, log_inode, log_offset, full_at) "
                "VALUES (%s, %s, %s, now()) ON CONFLICT (source) DO UPDATE SET "
                "log_inode = EXCLUDED.log_inode, log_offset = EXCLUDED.log_offset"
                + (", full_at = now()" if report.checked == "all" else "")
            )
            mark_due = mark is not None and (report.checked == "all" or row is None or tuple(row[:2]) != tuple(mark))
            total = len(todo)
            for start in range(0, total, max(1, batch)):
                ids = todo[start : start + batch]
                tables: dict[str, list[tuple]] = {t: [] for t in TRIP_TABLES}
                written = []
                for tid in ids:
                    doc = store.trip_document(tid)
                    h = content_hash(doc)
                    if archived.get(tid) == h:  # changed back meanwhile
                        report.unchanged += 1
                        continue
                    for table, rows in trip_rows(doc, h).items():
                        tables[table].extend(rows)
                    written.append(tid)
                if not written:
                    continue
                last = start + batch >= total
                with conn.transaction(), conn.cursor() as cur:
                    old = _contributions(cur, written)
                    cur.execute("DELETE FROM trips WHERE trip_id = ANY(%s)", (written,))
                    for table in TRIP_TABLES:
                        if tables[table]:
                            _copy(cur, table, tables[table])
                    _apply_stats(cur, old, _contributions(cur, written))
                    if last and mark_due:
                        assert mark is not None, "a mark is due only when the feed gave one"
                        cur.execute(mark_sql, (source, mark[0], mark[1]))
                        mark_due = False
                report.loaded += len(written)
                report.loaded_ids.extend(written)
                if progress is not None:
                    progress(min(start + len(ids), total), total, written[-1], "loaded")
            if mark_due:
                assert mark is not None, "a mark is due only when the feed gave one"
                with conn.transaction():
                    conn.execute(mark_sql, (source, mark[0], mark[1]))
        except psycopg.Error as exc:
            first = (str(exc).strip().splitlines() or ["database error"])[0]
            raise ArchiveError(
                f"the archive {report.database} refused the load ({first}); nothing of the "
                "trip batch in progress was written."
            ) from None
        finally:
            try:
                conn.rollback()
                conn.execute("SELECT pg_advisory_unlock_all()")
                conn.commit()
            except psycopg.Error:
                pass
    return report


# --- questions ---------------------------------------------------------------------------------------
SUMMARY_COLUMNS = (
    "site_id",
    "site_name",
    "season",
    "visits",
    "visits_with_do",
    "min_do_mg_l",
    "visits_below_criterion",
    "criterion_mg_l",
)


def season_summary(
    db: str | None, *, season: int | None = None, site: str | None = None, conn=None
) -> list[dict[str, Any]]:  # noqa: ANN001
    """Rows of ``site_season_summary`` (per site and season), optionally for one season and site."""
    import psycopg

    where = [c for c, v in (("season = %(season)s", season), ("site_id = %(site)s", site)) if v is not None]
    sql = (
        f"SELECT {', '.join(SUMMARY_COLUMNS)} FROM site_season_summary "
        + (f"WHERE {' AND '.join(where)} " if where else "")
        + "ORDER BY season, site_id"
    )
    own = conn is None
    conn = conn or connect(db)
    try:
        if schema_version(conn) < LATEST:
            raise ArchiveError(
                "the archive has not been loaded with this build yet; run 'streamtab archive load' first."
            )
        rows = conn.execute(sql, {"season": season, "site": site}).fetchall()
    except psycopg.Error as exc:
        raise ArchiveError(f"the archive refused the summary query ({str(exc).strip().splitlines()[0]})") from None
    finally:
        if own:
            conn.close()
    return [dict(zip(SUMMARY_COLUMNS, r, strict=True)) for r in rows]
