"""No revision ping-pong: a pull stores the hub's bytes as they are, so a push after it has nothing
to send, and devices that only sync leave the hub's revision count alone (real wsgidav on
127.0.0.1; content-addressed immutable revisions, sync/DESIGN.md; common practice)."""

import sync
from core.store import DeviceStore
from core.store.atomic import canonical_json_bytes
from tests.sync.conftest import dav_session, edit_stop_notes, edit_stop_temp, hub_files, new_trip, open_store


def hub_count(dav) -> int:
    return sum(len(v) for v in hub_files(dav.root / "hub").values())


def sync_round(devices, url):
    moved = 0
    for d in devices:
        moved += sync.push(d, url, session=dav_session(d.device_id)).pushed
        r = sync.pull(d, url, session=dav_session(d.device_id))
        moved += r.pulled + r.merged
    return moved


def test_pull_then_push_sends_nothing_and_holds_the_hub_bytes(dav, device_a, tmp_path):
    device_b = DeviceStore.open(tmp_path / "device-b", "tablet-B")  # a fresh tablet
    t = new_trip(device_a, stops=2)
    assert sync.push(device_a, dav.url, session=dav_session("tablet-A")).pushed == 1
    pulled = sync.pull(device_b, dav.url, session=dav_session("tablet-B"))
    assert pulled.pulled == 1
    (f,) = hub_files(dav.root / "hub")[t.id]
    # the device holds exactly the hub file: same revision, same bytes
    assert canonical_json_bytes(device_b.trip_document(t.id)) == f.read_bytes()
    s = dav_session("tablet-B")
    report = sync.push(device_b, dav.url, session=s)
    assert report.pushed == 0 and report.unchanged == 1
    assert s.request_count == 0  # nothing sent, nothing even asked
    # an office store without the site list pulls the same bytes too (no re-derive, no new revision)
    office = DeviceStore.open(tmp_path / "office", "office-desk")
    sync.pull(office, dav.url, session=dav_session("office-desk"))
    so = dav_session("office-desk")
    assert sync.push(office, dav.url, session=so).pushed == 0 and so.request_count == 0
    assert hub_count(dav) == 1


def test_ten_rounds_without_edits_leave_the_hub_revision_count_unchanged(dav, device_a, device_b, tmp_path):
    office = open_store(tmp_path / "office", "office-desk")
    laptop = DeviceStore.open(tmp_path / "laptop", "office-laptop")  # no site list of its own
    t = new_trip(device_a, stops=3)
    u = new_trip(device_b, day=4, stops=2)
    everyone = [device_a, device_b, office, laptop]
    sync_round(everyone, dav.url)
    # edits on both tablets: different stops, and one field on both (a conflict)
    edit_stop_notes(device_a, t.id, 0, "cattle upstream")
    edit_stop_notes(device_b, t.id, 2, "log jam below the weir")
    edit_stop_temp(device_a, t.id, 1, "12.8 C")
    edit_stop_temp(device_b, t.id, 1, "13.4 C")
    edit_stop_notes(office, u.id, 0, "checked at the office")
    for _ in range(4):  # bounded: let the edits settle
        if not sync_round(everyone, dav.url):
            break
    before = hub_count(dav)
    tables = sorted(p.name for p in (dav.root / "hub" / "program").rglob("*.json"))
    for _ in range(10):
        assert sync_round(everyone, dav.url) == 0
        assert sync_round(everyone[::-1], dav.url) == 0
    assert hub_count(dav) == before
    assert sorted(p.name for p in (dav.root / "hub" / "program").rglob("*.json")) == tables
    # and the devices agree byte for byte
    for tid in (t.id, u.id):
        docs = {canonical_json_bytes(d.trip_document(tid)) for d in everyone}
        assert len(docs) == 1
    assert device_a.trip_document(t.id)["conflicts"]  # the clash is kept for a person
