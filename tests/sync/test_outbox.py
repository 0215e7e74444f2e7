"""The outbox survives restarts: an interrupted push resumes with what is left, a damaged or
lost outbox entry costs a re-check but never a second copy at the hub (issue 5, section 2)."""

import json

import sync
from core.store.atomic import canonical_json_bytes
from tests.sync.conftest import FaultProxy, dav_session, hub_files, new_trip


def test_interrupted_push_resumes_with_what_is_left(dav, device_a):
    trips = [new_trip(device_a, day=d) for d in (1, 2, 3, 4)]
    proxy = FaultProxy(dav.port, seed=7)
    proxy.faults = ("http503", "cut_upload", "stall")  # faults where the hub did nothing
    try:
        pushed_first = []

        def cut_after_two(done, total, trip_id, result):
            if result == "pushed":
                pushed_first.append(trip_id)
            if len(pushed_first) == 2:
                proxy.fault_rate = 1.0  # the link drops: every connection now fails

        s = dav_session(
            "tablet-A",
            retry=sync.RetryPolicy(attempts=2, backoff_s=0.01, max_backoff_s=0.02),
            read_timeout_s=0.3,
            connect_timeout_s=0.3,
        )
        s.http.headers["Connection"] = "close"
        first = sync.push(device_a, proxy.url_for(), session=s, progress=cut_after_two)
        assert first.pushed == 2 and first.failed == 2
        proxy.fault_rate = 0.0
        s2 = dav_session("tablet-A")
        second = sync.push(device_a, proxy.url_for(), session=s2)
        assert (second.pushed, second.unchanged, second.failed) == (2, 2, 0)
        assert {t.trip_id for t in second.per_trip if t.result == "pushed"} == {t.id for t in trips} - set(pushed_first)
    finally:
        proxy.close()
    files = hub_files(dav.root / "hub")
    assert all(len(files[t.id]) == 1 for t in trips)


def test_damaged_outbox_entry_is_a_recheck_not_a_duplicate(dav, device_a):
    t = new_trip(device_a)
    sync.push(device_a, dav.url, session=dav_session())
    (entry_file,) = (device_a.data_dir / "sync").glob("*/trips/*.json")
    entry_file.write_bytes(b'{"trip_id": "')  # as if cut mid-write by a dead battery
    (entry_file.parent.parent / "manifest.json").unlink()  # and the cache gone with it
    r = sync.push(device_a, dav.url, session=dav_session())
    assert r.failed == 0 and r.pushed + r.unchanged == 1
    (f,) = hub_files(dav.root / "hub")[t.id]
    assert f.read_bytes() == canonical_json_bytes(device_a.trip_document(t.id))
    # and the entry is whole again
    assert json.loads(entry_file.read_bytes())["trip_id"] == t.id


def test_outbox_records_revision_hash_and_etag(dav, device_a):
    t = new_trip(device_a)
    sync.push(device_a, dav.url, session=dav_session())
    (box,) = list(__import__("sync.outbox", fromlist=["hubs"]).hubs(device_a.data_dir))
    e = box.get(t.id)
    doc = device_a.trip_document(t.id)
    assert e.pushed_revision == doc["revision"]
    assert e.pushed_hash == "sha256:" + __import__("hashlib").sha256(canonical_json_bytes(doc)).hexdigest()
    assert e.etag and e.hub_name in e.seen and e.year == "2026"
    assert box.hub_url == dav.url


def test_lagging_outbox_cache_costs_a_recheck_never_a_duplicate(dav, device_a):
    t = new_trip(device_a)
    s = dav_session()
    sync.push(device_a, dav.url, session=s)
    edit_stop_notes_ = __import__("tests.sync.conftest", fromlist=["edit_stop_notes"]).edit_stop_notes
    edit_stop_notes_(device_a, t.id, 0, "second visit")
    sync.push(device_a, dav.url, session=s)
    (journal,) = (device_a.data_dir / "sync").glob("*/journal.jsonl")
    journal.unlink()  # the cache now lags one push behind
    s.request_count = 0
    r = sync.push(device_a, dav.url, session=s)
    assert (r.pushed, r.unchanged, r.failed) == (0, 1, 0)
    assert s.request_count == 1  # one PROPFIND to re-check, nothing written
    assert len(hub_files(dav.root / "hub")[t.id]) == 2
