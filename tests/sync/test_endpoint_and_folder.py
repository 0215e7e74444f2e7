"""The HTTP POST endpoint target (Idempotency-Key from trip UUID and revision; 2xx accepted, 409
conflict) and the folder target (atomic writes, names from UUIDs only, nothing overwritten)."""

import os
import shutil
import stat

import pytest

import sync
from core.store.atomic import canonical_json_bytes
from sync import errors
from sync.targets import FolderTarget, PostTarget, WebDavTarget, open_target
from tests.sync.conftest import dav_session, edit_stop_notes, hub_files, new_trip, open_store


def test_endpoint_receives_each_revision_once_with_an_idempotency_key(intake, device_a):
    t = new_trip(device_a)
    s = dav_session("tablet-A")
    r = sync.push(device_a, intake.url, session=s)
    assert r.pushed == 1
    doc = device_a.trip_document(t.id)
    ((key, status),) = intake.requests
    assert status == 201 and key.startswith(f"{t.id}-r{doc['revision']}-")
    assert intake.received[key] == canonical_json_bytes(doc)
    # pushing again sends nothing; a lost outbox re-sends with the same key and the service
    # answers from its record (no second copy)
    assert sync.push(device_a, intake.url, session=s).unchanged == 1 and len(intake.requests) == 1
    shutil.rmtree(device_a.data_dir / "sync")
    assert sync.push(device_a, intake.url, session=s).pushed == 1
    assert intake.requests[-1] == (key, 200) and len(intake.by_trip[t.id]) == 1
    edit_stop_notes(device_a, t.id, 0, "turbid after rain")
    assert sync.push(device_a, intake.url, session=s).pushed == 1
    assert [rev for rev, _ in intake.by_trip[t.id]] == [doc["revision"], doc["revision"] + 1]


def test_endpoint_conflict_is_reported_and_left_to_retry(intake, device_a):
    t = new_trip(device_a)
    intake.conflict_trips.add(t.id)
    r = sync.push(device_a, intake.url, session=dav_session("tablet-A"))
    assert (r.conflicts, r.pushed) == (1, 0) and "409" in r.per_trip[0].message
    assert not r.complete
    with pytest.raises(errors.ConfigError, match="only receives"):
        sync.pull(device_a, intake.url, session=dav_session("tablet-A"))


def test_targets_are_picked_by_address(tmp_path):
    s = dav_session()
    assert isinstance(open_target(str(tmp_path), s), FolderTarget)
    assert isinstance(open_target(tmp_path.as_uri(), s), FolderTarget)
    assert isinstance(open_target("https://dav.example.org/hub/", s), WebDavTarget)
    assert isinstance(open_target("http://127.0.0.1:9/hub/", s), WebDavTarget)
    assert isinstance(open_target("post+https://intake.example.org/trips", s), PostTarget)
    for bad in ("", "ftp://x/y", "post+ftp://x", "post+/tmp/x"):
        with pytest.raises(errors.ConfigError):
            open_target(bad, s)


def test_folder_push_is_atomic_idempotent_and_pull_brings_it_back(tmp_path, device_a):
    hub = tmp_path / "usb-stick"
    hub.mkdir()
    t = new_trip(device_a, stops=2)
    r = sync.push(device_a, hub.as_uri(), session=dav_session())
    assert r.pushed == 1
    (f,) = hub_files(hub)[t.id]
    assert f.read_bytes() == canonical_json_bytes(device_a.trip_document(t.id))
    assert not [p for p in hub.rglob("*") if p.is_file() and p.suffix in (".tmp", ".part")]
    before = f.stat().st_mtime_ns
    assert sync.push(device_a, str(hub), session=dav_session()).unchanged == 1
    assert f.stat().st_mtime_ns == before
    office = open_store(tmp_path / "office", "office-desk")
    assert sync.pull(office, str(hub), session=dav_session()).pulled == 1
    assert office.trip_document(t.id)["stops"] == device_a.trip_document(t.id)["stops"]


def test_folder_never_overwrites_and_repairs_only_a_damaged_copy(tmp_path, device_a):
    hub = tmp_path / "share"
    hub.mkdir()
    t = new_trip(device_a)
    sync.push(device_a, str(hub), session=dav_session())
    (f,) = hub_files(hub)[t.id]
    good = f.read_bytes()
    f.write_bytes(good[: len(good) // 2])  # damaged (half a file)
    shutil.rmtree(device_a.data_dir / "sync")  # forget what was pushed
    r = sync.push(device_a, str(hub), session=dav_session())
    assert r.failed == 0 and f.read_bytes() == good


def test_missing_hub_folder_is_a_clear_error(tmp_path, device_a):
    new_trip(device_a)
    with pytest.raises(errors.ConfigError, match="does not exist"):
        sync.push(device_a, str(tmp_path / "not-mounted"), session=dav_session())


def test_names_at_the_hub_come_from_uuids_only(tmp_path, device_a):
    hub = tmp_path / "hub"
    hub.mkdir()
    doc = device_a.trip_document(new_trip(device_a).id)
    device_a.put_document(dict(doc, id="Mill-Ford_June", audit=[], revision=0), "typed id", expected_revision=None)
    r = sync.push(device_a, str(hub), session=dav_session())
    by = {t.trip_id: t for t in r.per_trip}
    assert by["Mill-Ford_June"].result == "failed" and "UUID" in by["Mill-Ford_June"].message
    assert r.pushed == 1
    assert not any("Mill" in p.name for p in hub.rglob("*"))


def test_status_reports_per_hub_state(tmp_path, device_a, intake):
    hub = tmp_path / "hub"
    hub.mkdir()
    t = new_trip(device_a)
    assert sync.status(device_a)[0].state == "never pushed"
    sync.push(device_a, str(hub), session=dav_session())
    sync.push(device_a, intake.url, session=dav_session())
    (st,) = sync.status(device_a)
    assert st.state == "synced" and len(st.hubs) == 2 and st.revision == device_a.trip_document(t.id)["revision"]
    edit_stop_notes(device_a, t.id, 0, "x")
    (st,) = sync.status(device_a)
    assert st.state == "changed" and {h.state for h in st.hubs} == {"changed"}


def test_background_push_reports_progress_and_the_result_from_its_thread(tmp_path, device_a):
    import threading

    hub = tmp_path / "hub"
    hub.mkdir()
    for d in (3, 4, 5):
        new_trip(device_a, day=d)
    seen, done = [], threading.Event()
    result = {}

    def on_done(report, error):
        result["report"], result["error"] = report, error
        done.set()

    thread = sync.run_in_background(
        sync.push,
        device_a,
        str(hub),
        session=dav_session(),
        progress=lambda *a: seen.append((threading.current_thread().name, a)),
        on_done=on_done,
    )
    assert done.wait(30)
    thread.join(5)
    assert result["error"] is None and result["report"].pushed == 3
    assert [a[0] for _, a in seen] == [1, 2, 3] and {n for n, _ in seen} == {"streamtab-sync"}
    # a failure comes back as the error, not lost in the thread
    done.clear()
    sync.run_in_background(sync.push, device_a, "gopher://x", session=dav_session(), on_done=on_done)
    assert done.wait(30) and isinstance(result["error"], errors.ConfigError)


def test_folder_hub_files_get_the_umask_permissions(tmp_path, device_a):
    """Under the usual umask 022 hub files are 0644, readable by the office's other accounts
    (common practice for shared drives), never owner-only."""
    hub = tmp_path / "office-drive"
    hub.mkdir()
    t = new_trip(device_a)
    old = os.umask(0o022)
    try:
        sync.push(device_a, str(hub), session=dav_session())
    finally:
        os.umask(old)
    files = [p for p in (hub / "trips").rglob("*") if p.is_file()]
    assert files and hub_files(hub)[t.id]
    assert {stat.S_IMODE(p.stat().st_mode) for p in files} == {0o644}
