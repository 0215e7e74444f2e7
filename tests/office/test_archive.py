"""The PostgreSQL archive against a real server (tests/pgserver.py): every part of a trip as rows,
incremental and idempotent loads, migrations from every earlier version, libpq credentials, the CLI."""

from __future__ import annotations

import json
import os
from datetime import datetime, timedelta, timezone
from pathlib import Path

import psycopg
import pytest

import sync
import sync.archive as archive
from core.records.exchange import import_sites_csv, import_trip_file
from core.records.models import ReviewEvent
from core.rules.review import new_event
from sync.archive.schema import LATEST, MIGRATIONS
from tests.office.conftest import OFFICE_PASSWORD
from tests.pgserver import PASSWORD_ROLE
from tests.sync.conftest import edit_stop_notes, new_trip, open_store

ROOT = Path(__file__).resolve().parents[2]
SAMPLES = ROOT / "sample_trips"


def _sample_store(path: Path):
    store = open_store(path, "office-1")
    import_sites_csv(store, SAMPLES / "sites.csv")
    for f in sorted(SAMPLES.glob("trip-*.json")):
        import_trip_file(store, f)
    return store


def _rows(db: str, sql: str, *params) -> list[tuple]:
    with psycopg.connect(db) as conn:
        return conn.execute(sql, params).fetchall()


def test_every_part_of_a_trip_becomes_rows(tmp_path, db):
    store = _sample_store(tmp_path / "office")
    report = archive.load(store, db)
    assert (report.loaded, report.unchanged, report.schema_from, report.schema_to) == (3, 0, 0, LATEST)
    for s in store.list_trips():
        doc = store.trip_document(s.id)
        stops = _rows(
            db,
            "SELECT stop_id, site_id, temp_text, temp_entered_unit, temp_value, temp_unit, "
            "do_text, do_value, do_unit, do_sat_mg_l, percent_saturation "
            "FROM stops WHERE trip_id = %s ORDER BY position",
            s.id,
        )
        assert len(stops) == len(doc["stops"])
        for row, stop in zip(stops, doc["stops"], strict=True):
            t = stop.get("temp") or {}
            d = stop.get("do") or {}
            der = stop.get("derived") or {}
            assert row == (
                stop["id"],
                stop["site_id"],
                t.get("text"),
                t.get("entered_unit"),
                t.get("value"),
                t.get("unit"),
                d.get("text"),
                d.get("value"),
                d.get("unit"),
                der.get("do_sat_mg_l"),
                der.get("percent_saturation"),
            )
        bottles = [b for st in doc["stops"] for b in st.get("bottles") or []]
        results = [r for b in bottles for r in b.get("lab_results") or []]
        cals = [c for c in (doc.get("pre_calibration"), doc.get("post_check")) if c]
        got = _rows(
            db,
            "SELECT (SELECT count(*) FROM bottles WHERE trip_id=%s), "
            "(SELECT count(*) FROM results WHERE trip_id=%s), "
            "(SELECT count(*) FROM calibrations WHERE trip_id=%s)",
            s.id,
            s.id,
            s.id,
        )[0]
        assert got == (len(bottles), len(results), len(cals))
        stop_flags = sorted(f["code"] for st in doc["stops"] for f in (st.get("derived") or {}).get("flags") or [])
        assert (
            sorted(r[0] for r in _rows(db, "SELECT code FROM flags WHERE trip_id=%s AND owner_kind='stop'", s.id))
            == stop_flags
        )
    assert _rows(db, "SELECT count(*) FROM sites")[0][0] == 5
    assert _rows(db, "SELECT warm_min_mg_l, cold_min_mg_l FROM settings") == [
        (store.settings().warm_min_mg_l, store.settings().cold_min_mg_l)
    ]
    # results as reported: every current result with its site and bottle
    reported = _rows(db, "SELECT bottle_label, analyte, value, unit FROM results_as_reported ORDER BY bottle_label")
    assert ("TV-0611", "do_winkler", 9.38, "mg/L") in reported


def test_season_summary_matches_the_documents(tmp_path, db):
    """Visits, minimum DO and visits below the criterion recomputed here from the documents: the
    site's own minimum, else the program's warm/cold minimum (common practice)."""
    store = _sample_store(tmp_path / "office")
    archive.load(store, db)
    sites = store.sites_by_id()
    st = store.settings()
    expect: dict[tuple[str, int], list] = {}
    for s in store.list_trips():
        doc = store.trip_document(s.id)
        for stop in doc["stops"]:
            site = sites[stop["site_id"]]
            crit = (
                site.min_do_mg_l
                if site.min_do_mg_l is not None
                else (st.cold_min_mg_l if site.water_class == "cold" else st.warm_min_mg_l)
            )
            do = (stop.get("derived") or {}).get("do_mg_l")
            e = expect.setdefault((stop["site_id"], int(doc["started_at"][:4])), [0, None, 0])
            e[0] += 1
            if do is not None:
                e[1] = do if e[1] is None else min(e[1], do)
                e[2] += do < crit
    rows = archive.season_summary(db)
    assert {
        (r["site_id"], r["season"]): [r["visits"], r["min_do_mg_l"], r["visits_below_criterion"]] for r in rows
    } == expect
    assert sum(r["visits_below_criterion"] for r in rows) >= 1  # the sample's hot afternoon
    only = archive.season_summary(db, season=2026, site="LK-03")
    assert [r["site_id"] for r in only] == ["LK-03"]
    assert archive.season_summary(db, season=2019) == []


def _xmins(db: str) -> dict[tuple[str, str], str]:
    out = {}
    for table, key in (
        ("trips", "trip_id"),
        ("stops", "stop_id"),
        ("bottles", "bottle_id"),
        ("results", "result_id"),
        ("sites", "site_id"),
        ("settings", "program"),
    ):
        for k, xmin in _rows(db, f"SELECT {key}, xmin::text FROM {table}"):
            out[(table, k)] = xmin
    return out


def test_second_load_writes_nothing_and_one_change_rewrites_one_trip(tmp_path, db):
    store = _sample_store(tmp_path / "office")
    extra = new_trip(store, stops=3)
    archive.load(store, db)
    before = _xmins(db)
    mark = "SELECT xmin::text, log_offset FROM load_sources"
    feed_mark = _rows(db, mark)
    again = archive.load(store, db)
    # read from the store's change feed: nothing saved since, so no trip is even compared
    assert (again.loaded, again.sites_written, again.settings_written, again.checked) == (0, 0, 0, "feed")
    assert _xmins(db) == before  # not one row rewritten
    assert _rows(db, mark) == feed_mark  # not even the feed's mark
    edit_stop_notes(store, extra.id, 1, "beaver dam upstream since last visit")
    third = archive.load(store, db)
    assert (third.loaded, third.loaded_ids) == (1, [extra.id])
    after = _xmins(db)
    changed = {k for k in after if after[k] != before.get(k)}
    trip_stops = {("stops", s.id) for s in extra.stops}
    assert changed == {("trips", extra.id)} | trip_stops
    assert len({after[k] for k in changed}) == 1  # one transaction wrote them all
    # ... and the feed's new mark with them: a load cut before that commit re-reads the same saves
    [(mark_xmin, offset)] = _rows(db, mark)
    assert mark_xmin == after[("trips", extra.id)] and offset > feed_mark[0][1]
    assert _rows(db, "SELECT notes FROM stops WHERE stop_id = %s", extra.stops[1].id) == [
        ("beaver dam upstream since last visit",)
    ]


def test_review_state_and_events_are_archived(tmp_path, db):
    store = open_store(tmp_path / "office", "office-1")
    trip = new_trip(store, stops=1)
    trip = store.save_trip(trip.model_copy(update={"ended_at": trip.started_at + timedelta(hours=5)}), "ended")
    ev = new_event(
        trip,
        "returned",
        by="D.M.",
        at=datetime(2026, 7, 2, tzinfo=timezone.utc),
        reasons=["pre-trip calibration missing"],
    )
    store.save_trip(
        trip.model_copy(update={"review_events": [ReviewEvent.model_validate(ev, strict=False)]}), "returned"
    )
    archive.load(store, db)
    assert _rows(db, "SELECT review_state FROM trips") == [("returned",)]
    assert _rows(db, "SELECT action, by_name, reasons FROM review_events") == [
        ("returned", "D.M.", ["pre-trip calibration missing"])
    ]


def _schema_shape(db: str) -> list[tuple]:
    cols = _rows(
        db,
        "SELECT table_name, column_name, data_type FROM information_schema.columns "
        "WHERE table_schema = 'public' ORDER BY table_name, column_name",
    )
    views = _rows(db, "SELECT table_name FROM information_schema.views WHERE table_schema='public' ORDER BY 1")
    idx = _rows(db, "SELECT indexname FROM pg_indexes WHERE schemaname='public' ORDER BY 1")
    return cols + views + idx


@pytest.mark.parametrize("start", [v for v, _, _ in MIGRATIONS[:-1]])
def test_migrations_from_each_earlier_version(tmp_path, pg, db, start):
    """A database at every earlier version, holding rows, reaches the same schema as a fresh one,
    and the next load fills what the new version added."""
    store = _sample_store(tmp_path / "office")
    trip = store.list_trips()[0]
    with psycopg.connect(db) as conn:
        archive.migrate(conn, upto=start)
        assert archive.schema_version(conn) == start
        conn.execute(
            "INSERT INTO trips (trip_id, revision, content_hash, started_at, season, document) "
            "VALUES (%s, %s, %s, %s, 2026, '{}')",
            (trip.id, trip.revision, trip.content_hash, trip.started_at),
        )
        conn.commit()
    report = archive.load(store, db)
    assert (report.schema_from, report.schema_to) == (start, LATEST)
    fresh = pg.create_database(f"fresh_{start}")
    with psycopg.connect(fresh) as conn:
        archive.migrate(conn)
    assert _schema_shape(db) == _schema_shape(fresh)
    # the row written under the old version is rewritten when a migration added derived rows
    reloaded = start < 2
    assert (trip.id in report.loaded_ids) == reloaded
    assert _rows(db, "SELECT count(*) FROM stops WHERE trip_id = %s", trip.id)[0][0] == (
        trip.stop_count if reloaded else 0
    )


def test_a_newer_archive_is_refused(db):
    with psycopg.connect(db) as conn:
        archive.migrate(conn)
        conn.execute("INSERT INTO archive_schema (version, description) VALUES (%s, 'from the future')", (LATEST + 1,))
        conn.commit()
        with pytest.raises(archive.ArchiveError, match="newer than this build"):
            archive.migrate(conn)


def test_credentials_follow_libpq_and_are_never_echoed(tmp_path, pg, db, cli):
    store = open_store(tmp_path / "office", "office-1")
    new_trip(store, stops=1)
    dbname = db.split("dbname=")[1].split()[0]
    with psycopg.connect(db, autocommit=True) as conn:
        conn.execute(f"GRANT ALL ON SCHEMA public TO {PASSWORD_ROLE}")
    url = f"host={pg.socket_dir} port=5432 dbname={dbname} user={PASSWORD_ROLE}"
    home = tmp_path / "home"
    home.mkdir()
    passfile = home / "pgpass"
    passfile.write_text(f"*:*:*:{PASSWORD_ROLE}:{OFFICE_PASSWORD}\n")
    os.chmod(passfile, 0o600)
    env = {**os.environ, "PYTHONPATH": str(ROOT), "HOME": str(home), "PGPASSFILE": str(passfile)}
    for k in ("PGPASSWORD", "PGSERVICE", "PGSERVICEFILE", archive.ENV_DB):
        env.pop(k, None)
    r = cli("archive", "load", "--db", url, "--json", data_dir=tmp_path / "office", env=env)
    assert r.returncode == 0, r.stderr
    assert json.loads(r.stdout)["loaded"] == 1
    assert OFFICE_PASSWORD not in r.stdout + r.stderr
    # the URL may also come from the environment
    r = cli("archive", "summary", "--json", env={**env, archive.ENV_DB: url})
    assert r.returncode == 0 and json.loads(r.stdout)[0]["visits"] == 1
    # a password on the command line is refused, and not echoed
    r = cli("archive", "summary", "--db", url + f" password={OFFICE_PASSWORD}", env=env)
    assert r.returncode == 2 and "password file" in r.stderr and OFFICE_PASSWORD not in r.stderr
    r = cli("archive", "summary", "--db", f"postgresql://{PASSWORD_ROLE}:{OFFICE_PASSWORD}@/{dbname}", env=env)
    assert r.returncode == 2 and OFFICE_PASSWORD not in r.stderr
    # a password file others can read is refused, naming the fix
    os.chmod(passfile, 0o644)
    r = cli("archive", "summary", "--db", url, env=env)
    assert r.returncode == 2 and "chmod 600" in r.stderr
    # a wrong password: one line, no traceback, no password
    os.chmod(passfile, 0o600)
    passfile.write_text(f"*:*:*:{PASSWORD_ROLE}:not-{OFFICE_PASSWORD}\n")
    r = cli("archive", "summary", "--db", url, env=env)
    assert r.returncode == 2 and "cannot connect" in r.stderr and "Traceback" not in r.stderr
    assert len(r.stderr.strip().splitlines()) == 1 and "\t" not in r.stderr
    assert OFFICE_PASSWORD not in r.stderr


def test_cli_load_from_a_hub_and_summary(tmp_path, db, cli):
    crew = open_store(tmp_path / "tablet", "tablet-A")
    for day in (3, 10):
        new_trip(crew, day=day, stops=2)
    hub = tmp_path / "hub"
    hub.mkdir()
    assert sync.push(crew, str(hub)).pushed == 2
    office = tmp_path / "office"  # no store yet: loading --from a hub starts one, and says so
    r = cli("archive", "load", "--from", str(hub), "--db", db, "--json", data_dir=office)
    assert r.returncode == 0, r.stderr
    assert "created a new device store" in r.stderr
    out = json.loads(r.stdout)
    assert (out["loaded"], out["pull"]["pulled"]) == (2, 2)
    assert "load [" in r.stderr  # the progress bar
    r = cli("archive", "load", "--from", str(hub), "--db", db, "--json", data_dir=office)
    assert json.loads(r.stdout)["loaded"] == 0
    r = cli("archive", "load", "--db", db, data_dir=office)  # the text says what was checked
    assert r.returncode == 0 and "0 trip(s) loaded (only trips saved since the last load were checked)" in r.stdout
    r = cli("archive", "load", "--db", db, data_dir=tmp_path / "no-store")  # without --from: nothing created
    assert r.returncode == 2 and "no device store there" in r.stderr and not (tmp_path / "no-store").exists()
    r = cli("archive", "summary", "--db", db, "--season", "2026")
    assert r.returncode == 0 and "LK-01" in r.stdout and "Mill Ford" in r.stdout
    r = cli("archive", "summary", "--db", db, "--season", "twenty")
    assert r.returncode == 2 and "--season" in r.stderr
    r = cli("archive", "summary", "--db", "host=/nonexistent-socket-dir dbname=x connect_timeout=2")
    assert r.returncode == 2 and "cannot connect" in r.stderr and "Traceback" not in r.stderr


def test_custody_hand_offs_are_archived_per_bottle(tmp_path, db):
    from core.records.models import CustodyRecord

    store = _sample_store(tmp_path / "office")
    summary = next(s for s in store.list_trips() if s.bottle_labels)
    trip = store.load_trip(summary.id)
    bottles = [b.id for st in trip.stops for b in st.bottles][:2]
    rec = CustodyRecord(
        bottle_ids=bottles,
        relinquished_by="R.O.",
        received_by="Lab desk (demo)",
        at=trip.started_at + timedelta(hours=8),
        at_lab=True,
        condition="intact, on ice",
    )
    store.save_trip(trip.model_copy(update={"custody": [rec]}), "hand-off to the lab")
    archive.load(store, db)
    assert _rows(db, "SELECT bottle_id, by_name, to_name, action, notes FROM custody ORDER BY bottle_id") == [
        (b, "R.O.", "Lab desk (demo)", "received at the lab", "intact, on ice") for b in sorted(bottles)
    ]


def test_the_kept_season_summary_equals_a_fresh_count(tmp_path, db):
    """After loads that move the minimum, empty a site and change a criterion, the summary kept
    by the loads equals the same aggregate computed from every stop (common practice)."""
    from sync.archive.schema import STATS_SELECT

    store = open_store(tmp_path / "office", "office-1")
    trips = [new_trip(store, day=d, stops=3) for d in (3, 4, 5)]
    archive.load(store, db)

    def fresh() -> list:
        return sorted(_rows(db, STATS_SELECT.format(where="true")))

    def kept() -> list:
        return sorted(
            _rows(
                db,
                "SELECT site_id, season, visits, visits_with_do, min_do_mg_l, "
                "visits_below_criterion, criterion_mg_l FROM site_season_stats",
            )
        )

    assert kept() == fresh() and len(kept()) == 3
    # the lowest DO goes down, then back up (the trip holding the minimum is rewritten)
    from core.records.models import measure

    for text in ("3.1 mg/L", "8.8 mg/L"):
        trip = store.load_trip(trips[1].id)
        stops = list(trip.stops)
        stops[0] = stops[0].model_copy(update={"do": measure("do", text)})
        store.save_trip(trip.model_copy(update={"stops": stops}), "DO corrected")
        archive.load(store, db)
        assert kept() == fresh()
    assert min(r[4] for r in kept()) == 8.8  # 3.1 is gone: the minimum was counted again
    # a stop moved to another site empties nothing but shifts counts; a stricter site criterion
    trip = store.load_trip(trips[2].id)
    stops = [s.model_copy(update={"site_id": "LK-01"}) for s in trip.stops]
    store.save_trip(trip.model_copy(update={"stops": stops}), "sites corrected")
    site = store.sites_by_id()["LK-01"]
    store.save_sites([site.model_copy(update={"min_do_mg_l": 9.5})])
    report = archive.load(store, db)
    assert report.sites_written == 1
    assert kept() == fresh()
    lk1 = next(r for r in kept() if r[0] == "LK-01")
    assert (lk1[2], lk1[5], lk1[6]) == (5, 5, 9.5)  # 3 + 2 visits, all below 9.5 mg/L


def test_a_lost_feed_or_a_day_without_a_full_check_compares_every_trip(tmp_path, db):
    store = _sample_store(tmp_path / "office")
    extra = new_trip(store, stops=2)
    assert archive.load(store, db).checked == "all"
    edit_stop_notes(store, extra.id, 0, "saved while the feed was lost")
    (store.data_dir / "changes.log").unlink()  # as after a crash or a rotation
    report = archive.load(store, db)
    assert (report.checked, report.loaded_ids, report.unchanged) == ("all", [extra.id], 3)
    edit_stop_notes(store, extra.id, 1, "read from the feed")
    assert archive.load(store, db).loaded_ids == [extra.id]
    with psycopg.connect(db) as conn:
        conn.execute("UPDATE load_sources SET full_at = now() - interval '25 hours'")
    assert archive.load(store, db).checked == "all"
