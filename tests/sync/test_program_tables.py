"""The site list and the program settings travel with the trips, and each stop is judged by the site
facts it was saved with (real store, real wsgidav on 127.0.0.1 and a folder hub; newest entry per
site id wins, sync/program.py; checks: core/rules/qc.py)."""

import os
import stat
from datetime import datetime, timedelta, timezone

import sync
from core.records.models import Site, Stop, Trip, measure
from core.rules.qc import trip_flags
from core.store import DeviceStore
from core.store.atomic import canonical_json_bytes
from sync import program
from tests.conftest import run_cli
from tests.sync.conftest import dav_session

# An invented cold-water site high in the valley and a warm one lower down.
HIGH = Site(id="TV-H1", name="Scree Pool", elevation_m=820.0, water_class="cold")
LOW = Site(id="TV-L1", name="Reed Flats", elevation_m=45.0, water_class="warm")


def tablet(path, device="tablet-A"):
    store = DeviceStore.open(path, device)
    store.save_sites([HIGH, LOW])
    return store


def flagged_trip(store):
    """Two stops whose flags depend on the site facts (common practice thresholds):
    at 820 m a station pressure of 1013 hPa looks sea-level adjusted (core.science.pressure),
    and 6.0 mg/L is below the cold-water criterion of 6.5 mg/L (US EPA 1986, from memory)
    but not below the warm-water one of 5.0 mg/L."""
    start = datetime(2026, 6, 9, 7, 30, tzinfo=timezone.utc)
    trip = store.save_trip(Trip(program="Tamsin Valley Stream Watch", crew=["K.T."], started_at=start), "trip started")
    for i, site in enumerate((HIGH, LOW)):
        stop = Stop(
            site_id=site.id,
            arrived_at=start + timedelta(hours=i + 1),
            temp=measure("temp", "9.5 C"),
            pressure=measure("pressure", "1013 hPa"),
            do=measure("do", "6.0 mg/L"),
        )
        trip = store.save_stop(trip.id, stop)
    return trip


def codes(store, trip_id, sites=None):
    trip = store.load_trip(trip_id)
    now = datetime(2026, 6, 9, 12, 0, tzinfo=timezone.utc)
    flags = trip_flags(trip, store.settings(), now, sites=store.sites_by_id() if sites is None else sites)
    return {s.site_id: sorted(f.code for f in flags[s.id] if not f.code.startswith("holding.")) for s in trip.stops}


def test_pull_into_an_empty_office_store_keeps_sites_and_flags(dav, tmp_path):
    a = tablet(tmp_path / "a")
    t = flagged_trip(a)
    on_tablet = codes(a, t.id)
    assert "pressure.sea_level_adjusted" in on_tablet["TV-H1"]
    assert "do.below_criterion" in on_tablet["TV-H1"] and "do.below_criterion" not in on_tablet["TV-L1"]
    report = sync.push(a, dav.url, session=dav_session("tablet-A"))
    assert report.pushed == 1 and report.program == ["site list published"]
    office = DeviceStore.open(tmp_path / "office", "office-desk")
    pulled = sync.pull(office, dav.url, session=dav_session("office-desk"))
    assert pulled.pulled == 1 and pulled.program and "2 site(s)" in pulled.program[0]
    assert {s.id for s in office.sites()} == {"TV-H1", "TV-L1"}
    assert codes(office, t.id) == on_tablet
    assert all("stop.unknown_site" not in c for c in codes(office, t.id).values())
    # the snapshot alone carries the facts: judged the same with an empty site list too
    assert codes(office, t.id, sites={}) == on_tablet


def test_an_office_edit_of_a_site_reaches_the_tablets_but_does_not_rejudge_old_stops(dav, tmp_path):
    a = tablet(tmp_path / "a")
    b = tablet(tmp_path / "b", "tablet-B")
    t = flagged_trip(a)
    before = codes(a, t.id)
    office = DeviceStore.open(tmp_path / "office", "office-desk")
    for d in (a, b, office):
        sync.push(d, dav.url, session=dav_session(d.device_id))
        sync.pull(d, dav.url, session=dav_session(d.device_id))
    # the office lowers the high site's criterion (and fixes its elevation) in December
    office.save_site(HIGH.model_copy(update={"min_do_mg_l": 5.5, "elevation_m": 790.0}))
    assert sync.push(office, dav.url, session=dav_session("office-desk")).program == ["site list published"]
    for d in (a, b):
        r = sync.pull(d, dav.url, session=dav_session(d.device_id))
        assert r.program and "TV-H1" in r.program[0]
        site = d.sites_by_id()["TV-H1"]
        assert (site.min_do_mg_l, site.elevation_m) == (5.5, 790.0)
    # the June stop is still judged by the facts it was saved with
    assert codes(a, t.id) == before and codes(office, t.id) == before
    shown = run_cli("trip", "show", t.id, data_dir=a.data_dir)
    assert shown.returncode == 0, shown.stderr
    assert "site list changed since this stop was saved" in shown.stdout
    assert "elevation 820 m when saved, 790 m in today's site list" in shown.stdout
    assert "DO criterion 6.5 mg/L when saved, 5.5 mg/L" in shown.stdout
    # a stop saved now uses today's facts: 6.0 mg/L is no longer below the criterion
    stop = Stop(
        site_id="TV-H1",
        arrived_at=datetime(2026, 12, 2, 9, 0, tzinfo=timezone.utc),
        temp=measure("temp", "4.0 C"),
        pressure=measure("pressure", "925 hPa"),
        do=measure("do", "6.0 mg/L"),
    )
    new = a.save_stop(t.id, stop)
    snap = next(s for s in new.stops if s.id == stop.id).site_snapshot
    assert snap.min_do_mg_l == 5.5 and snap.elevation_m == 790.0
    # sites settle: more rounds publish no further table files
    everyone = (a, b, office)
    for _ in range(2):
        for d in everyone:
            sync.push(d, dav.url, session=dav_session(d.device_id))
            sync.pull(d, dav.url, session=dav_session(d.device_id))
    published = sorted((dav.root / "hub" / "program" / "sites").iterdir())
    for _ in range(3):
        for d in everyone:
            assert not sync.push(d, dav.url, session=dav_session(d.device_id)).program
            assert not sync.pull(d, dav.url, session=dav_session(d.device_id)).program
    assert sorted((dav.root / "hub" / "program" / "sites").iterdir()) == published
    lists = {program.sites_bytes(s.model_dump(mode="json") for s in d.sites()) for d in everyone}
    assert len(lists) == 1


def test_settings_travel_and_the_newest_wins(tmp_path):
    hub = tmp_path / "share"
    hub.mkdir()
    a = tablet(tmp_path / "a")
    office = DeviceStore.open(tmp_path / "office", "office-desk")
    office.save_settings(
        office.settings().model_copy(update={"program": "Tamsin Valley Stream Watch", "cold_min_mg_l": 7.0})
    )
    sync.push(office, str(hub))
    r = sync.pull(a, str(hub))
    assert r.program == ["program settings updated from the hub"]
    assert a.settings().cold_min_mg_l == 7.0
    # a later edit on the tablet wins over the office's older one, everywhere
    a.save_settings(a.settings().model_copy(update={"cold_min_mg_l": 6.0}))
    sync.push(a, str(hub))
    sync.pull(office, str(hub))
    assert office.settings().cold_min_mg_l == 6.0
    assert canonical_json_bytes(office.settings().model_dump(mode="json")) == canonical_json_bytes(
        a.settings().model_dump(mode="json")
    )


def test_folder_hub_table_files_get_the_umask_permissions(tmp_path):
    """0644 under umask 022 (common practice for shared drives)."""
    hub = tmp_path / "office-drive"
    hub.mkdir()
    a = tablet(tmp_path / "a")
    old = os.umask(0o022)
    try:
        sync.push(a, str(hub))
    finally:
        os.umask(old)
    files = list((hub / "program").rglob("*.json"))
    assert files
    assert {stat.S_IMODE(p.stat().st_mode) for p in files} == {0o644}
    for p in files:
        assert program.name_matches(p.name, p.read_bytes())
