"""The hub's change log (sync.changelog) on a real wsgidav server and on a folder: a pull reads only
new entries; a lost, damaged or missing entry costs a walk, never a trip."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

import sync
from sync import changelog
from sync.layout import device_key
from tests.sync.conftest import dav_session, edit_stop_notes, new_trip, open_store


def _log_files(hub: Path) -> list[Path]:
    return sorted((hub / "log").rglob("e*.json"))


def _office(tmp_path):
    return open_store(tmp_path / "office", "office-desk")


def test_each_push_logs_the_files_it_added(dav, device_a):
    trips = [new_trip(device_a, day=d) for d in (3, 4)]
    sync.push(device_a, dav.url, session=dav_session())
    hub = dav.root / "hub"
    entries = _log_files(hub)
    assert [p.parent.name for p in entries] == [device_key("tablet-A")]
    doc = json.loads(entries[0].read_bytes())
    assert doc["seq"] == 1 and len(doc["files"]) == 2
    for f in doc["files"]:
        assert (hub / "trips" / f).is_file()  # only names files that exist
    assert {f.split("/")[1] for f in doc["files"]} == {t.id for t in trips}
    # the name is content-addressed: entry_name(seq, bytes) gives it back
    assert changelog.entry_name(1, entries[0].read_bytes()) == entries[0].name
    s = dav_session()
    assert sync.push(device_a, dav.url, session=s).pushed == 0
    assert s.request_count == 0 and len(_log_files(hub)) == 1  # nothing pushed, nothing logged


def test_a_pull_reads_only_new_entries_even_within_one_second(dav, device_a, tmp_path):
    """Pushes and pulls in quick succession (several per second): every change is found from the
    log, although folder dates have one-second steps (RFC 9110 HTTP dates)."""
    t = new_trip(device_a, stops=2)
    others = [new_trip(device_a, day=d) for d in (5, 6, 7)]
    sync.push(device_a, dav.url, session=dav_session())
    office = _office(tmp_path)
    first = sync.pull(office, dav.url, session=dav_session())
    assert (first.pulled, first.listed) == (4, "walk")
    for i in range(4):
        edit_stop_notes(device_a, t.id, 0, f"round {i}: cattle in the ford")
        sync.push(device_a, dav.url, session=dav_session())
        s = dav_session()
        report = sync.pull(office, dav.url, session=s)
        assert report.listed == "log"
        assert [r.trip_id for r in report.per_trip] == [t.id]
        assert report.per_trip[0].result in ("pulled", "merged") and not report.per_trip[0].conflicts
        assert office.load_trip(t.id).stops[0].notes == f"round {i}: cattle in the ford"
        # PROPFIND log/, PROPFIND log/<device>/, GET entry, GET revision (issue target ≤ 5)
        assert s.request_count <= 5
    quiet = dav_session()
    again = sync.pull(office, dav.url, session=quiet)
    # the log's listing (≤ 2) and one PROPFIND of program/ (the site list and settings travel too)
    assert again.per_trip == [] and quiet.request_count <= 3
    assert {x.id for x in others} <= {s.id for s in office.list_trips()}


@pytest.mark.parametrize("damage", ["truncated", "deleted", "altered"])
def test_a_damaged_or_lost_entry_costs_a_walk_not_a_trip(dav, device_a, tmp_path, damage):
    t = new_trip(device_a)
    sync.push(device_a, dav.url, session=dav_session())
    office = _office(tmp_path)
    sync.pull(office, dav.url, session=dav_session())
    edit_stop_notes(device_a, t.id, 0, "first change")
    sync.push(device_a, dav.url, session=dav_session())
    edit_stop_notes(device_a, t.id, 0, "second change")
    sync.push(device_a, dav.url, session=dav_session())
    entries = _log_files(dav.root / "hub")
    assert [json.loads(p.read_bytes())["seq"] for p in entries] == [1, 2, 3]
    hit = entries[1]
    if damage == "truncated":
        hit.write_bytes(hit.read_bytes()[:20])
    elif damage == "deleted":
        hit.unlink()  # a hole in the device's numbers
    else:
        doc = json.loads(hit.read_bytes())
        doc["files"] = []
        hit.write_bytes(json.dumps(doc).encode())
    report = sync.pull(office, dav.url, session=dav_session())
    assert report.listed == "walk"
    assert office.load_trip(t.id).stops[0].notes == "second change"
    # after the walk, the log serves again
    edit_stop_notes(device_a, t.id, 0, "third change")
    sync.push(device_a, dav.url, session=dav_session())
    later = sync.pull(office, dav.url, session=dav_session())
    assert later.listed == "log" and office.load_trip(t.id).stops[0].notes == "third change"


def test_an_entry_that_could_not_be_written_is_written_by_the_next_push(tmp_path, device_a):
    hub = tmp_path / "hub"
    hub.mkdir()
    t = new_trip(device_a)
    sync.push(device_a, str(hub))
    office = _office(tmp_path)
    sync.pull(office, str(hub))
    edit_stop_notes(device_a, t.id, 0, "changed while the log was blocked")
    own = hub / "log" / device_key("tablet-A")
    for p in own.iterdir():
        p.unlink()
    own.rmdir()
    own.write_bytes(b"")  # a file where the folder should be: writes fail
    assert sync.push(device_a, str(hub)).pushed == 1  # the trip still goes
    state = changelog.LogState.load(next((tmp_path / "device-a" / "sync").iterdir()))
    assert len(state.pending) == 1
    own.unlink()
    sync.push(device_a, str(hub))  # nothing new to push; the pending entry goes
    assert changelog.LogState.load(state.path.parent).pending == []
    report = sync.pull(office, str(hub))
    assert report.listed == "log" and report.failed == 0
    assert office.load_trip(t.id).stops[0].notes == "changed while the log was blocked"


def test_a_day_without_a_walk_walks_and_a_hub_without_a_log_still_pulls(tmp_path, device_a):
    hub = tmp_path / "hub"
    hub.mkdir()
    t = new_trip(device_a)
    sync.push(device_a, str(hub))
    office = _office(tmp_path)
    sync.pull(office, str(hub))
    folder = next((tmp_path / "office" / "sync").iterdir())
    state = changelog.LogState.load(folder)
    state.walked_at -= changelog.REWALK_AFTER_S + 1
    state.save()
    assert sync.pull(office, str(hub)).listed == "walk"
    assert sync.pull(office, str(hub)).listed == "log"
    # a hub written by builds without the log: every pull walks, and finds the change
    import shutil

    shutil.rmtree(hub / "log")
    edit_stop_notes(device_a, t.id, 0, "pushed by an older build")
    sync.push(device_a, str(hub))
    shutil.rmtree(hub / "log")  # as if pushed by a build without the log
    report = sync.pull(office, str(hub))
    assert report.listed == "walk" and office.load_trip(t.id).stops[0].notes == "pushed by an older build"


def test_a_server_refusing_infinite_depth_is_walked(tmp_path, device_a):
    """RFC 4918 §9.1: a server may answer PROPFIND Depth: infinity with 403; the pull then lists
    the hub with Depth: 1, and wrong credentials still stop it."""
    from sync.errors import Unauthorized
    from tests.sync.conftest import finite_depth_only, start_dav

    server = start_dav(tmp_path / "dav", wrap=finite_depth_only)
    try:
        trips = [new_trip(device_a, day=d) for d in (3, 4)]
        sync.push(device_a, server.url, session=dav_session())
        office = _office(tmp_path)
        report = sync.pull(office, server.url, session=dav_session())
        assert (report.pulled, report.listed) == (2, "walk")
        assert {t.id for t in trips} <= {s.id for s in office.list_trips()}
        with pytest.raises(Unauthorized):
            from sync.session import Credentials

            sync.pull(
                _office(tmp_path / "x"), server.url, session=dav_session(credentials=Credentials("ro-tablet", "wrong"))
            )
    finally:
        server.stop()


def test_on_a_server_refusing_infinite_depth_a_pull_stays_within_five_requests(tmp_path, device_a):
    """Issue target (common practice for this project): a pull with one trip changed costs ≤ 5
    requests even where PROPFIND Depth: infinity is refused (RFC 4918 §9.1): the log's 4, plus one
    Depth-1 PROPFIND of program/ whose folder dates say the site list and settings did not move.
    A site list published later still arrives (its folder's date moved)."""
    import time

    from core.records.models import Site
    from tests.sync.conftest import finite_depth_only, start_dav

    seen: list = []
    server = start_dav(tmp_path / "dav", wrap=lambda app: finite_depth_only(app, seen))
    try:
        device_a.save_sites([Site(id="TV-01", name="Scree Pool", elevation_m=820.0, water_class="cold")])
        t = new_trip(device_a, stops=2)
        sync.push(device_a, server.url, session=dav_session())
        office = _office(tmp_path)
        assert sync.pull(office, server.url, session=dav_session()).listed == "walk"
        assert "TV-01" in office.sites_by_id()
        time.sleep(changelog.FOLDER_SETTLE_S + 0.1)  # past the one-second steps of folder dates
        sync.pull(office, server.url, session=dav_session())  # lists what settled only now
        edit_stop_notes(device_a, t.id, 0, "beaver dam above the riffle")
        sync.push(device_a, server.url, session=dav_session())
        s = dav_session()
        del seen[:]
        report = sync.pull(office, server.url, session=s)
        assert report.listed == "log" and [r.result for r in report.per_trip] == ["pulled"]
        assert s.request_count <= 5, seen
        assert ("PROPFIND", "infinity") not in seen  # nothing asked that the server refuses
        quiet = dav_session()
        assert sync.pull(office, server.url, session=quiet).per_trip == []
        assert quiet.request_count <= 3
        # a site list published later is still brought in
        device_a.save_sites([Site(id="TV-02", name="Reed Flats", elevation_m=45.0, water_class="warm")])
        assert sync.push(device_a, server.url, session=dav_session()).program == ["site list published"]
        later = sync.pull(office, server.url, session=dav_session())
        assert later.program and "TV-02" in later.program[0]
        assert {"TV-01", "TV-02"} <= set(office.sites_by_id())
    finally:
        server.stop()


def test_a_damaged_table_file_is_reported_at_every_pull_where_depth_is_finite(tmp_path, device_a):
    """A site list file whose bytes do not match the hash in its name is left aside and read again
    at the next pull (never blacklisted, sync/DESIGN.md), although its folder's date did not move
    (common practice for this project)."""
    import time

    from tests.sync.conftest import finite_depth_only, start_dav

    server = start_dav(tmp_path / "dav", wrap=finite_depth_only)
    try:
        new_trip(device_a)
        sync.push(device_a, server.url, session=dav_session())
        sites = server.root / "hub" / "program" / "sites"
        good = next(sites.iterdir())
        bad = sites / ("0" * 24 + ".json")
        bad.write_bytes(good.read_bytes())  # valid JSON under a name that is not its hash
        office = _office(tmp_path)
        time.sleep(changelog.FOLDER_SETTLE_S + 0.1)  # the folder's date settles before the first pull
        for _ in range(2):
            report = sync.pull(office, server.url, session=dav_session())
            assert any(bad.name in line and "left aside" in line for line in report.program), report.program
    finally:
        server.stop()


def test_cli_pull_reads_the_log_and_full_walks(tmp_path, device_a, cli):
    hub = tmp_path / "hub"
    hub.mkdir()
    new_trip(device_a)
    sync.push(device_a, str(hub))
    office = tmp_path / "office"
    _office(tmp_path)
    first = json.loads(cli("sync", "pull", "--from", str(hub), "--json", data_dir=office).stdout)
    again = json.loads(cli("sync", "pull", "--from", str(hub), "--json", data_dir=office).stdout)
    whole = json.loads(cli("sync", "pull", "--from", str(hub), "--full", "--json", data_dir=office).stdout)
    assert (first["listed"], first["pulled"]) == ("walk", 1)
    assert (again["listed"], again["per_trip"]) == ("log", [])
    assert (whole["listed"], whole["unchanged"]) == ("walk", 1)
