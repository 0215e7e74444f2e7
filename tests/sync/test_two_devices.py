"""Two tablets editing the same trip, pushing in both orders: every change reaches the hub, a
field changed on both sides comes back as a readable conflict, and the final documents agree
whichever device pushed first (three-way merge by element id; core/records/merge.py)."""

import pytest

import sync
from tests.sync.conftest import converge, dav_session, edit_stop_notes, edit_stop_temp, new_trip, open_store


def semantic(doc):
    return {k: v for k, v in doc.items() if k not in ("revision", "updated_at", "audit")}


@pytest.mark.parametrize("first", ["A", "B"])
def test_changes_on_different_stops_both_arrive(dav, device_a, device_b, tmp_path, first):
    t = new_trip(device_a, stops=3)
    sync.push(device_a, dav.url, session=dav_session("tablet-A"))
    sync.pull(device_b, dav.url, session=dav_session("tablet-B"))
    edit_stop_notes(device_a, t.id, 0, "cattle upstream")
    edit_stop_notes(device_b, t.id, 2, "log jam below the weir")
    order = [device_a, device_b] if first == "A" else [device_b, device_a]
    reports = [sync.push(d, dav.url, session=dav_session(d.device_id)) for d in order]
    assert all(r.failed == 0 for r in reports)
    assert reports[1].conflicts == 0  # different fields: merged without conflict
    converge([device_a, device_b], dav.url)
    a, b = device_a.trip_document(t.id), device_b.trip_document(t.id)
    assert [s["notes"] for s in a["stops"]] == ["cattle upstream", "", "log jam below the weir"]
    assert semantic(a) == semantic(b)
    assert not a["conflicts"]


@pytest.mark.parametrize("first", ["A", "B"])
def test_same_field_changed_on_both_devices_is_a_readable_conflict(dav, device_a, device_b, tmp_path, first):
    t = new_trip(device_a, stops=2)
    device_a.set_device_name("Tablet A")
    device_b.set_device_name("Tablet B")
    sync.push(device_a, dav.url, session=dav_session("tablet-A"))
    sync.pull(device_b, dav.url, session=dav_session("tablet-B"))
    edit_stop_temp(device_a, t.id, 1, "12.8 C")
    edit_stop_temp(device_b, t.id, 1, "13.4 C")
    order = [device_a, device_b] if first == "A" else [device_b, device_a]
    sync.push(order[0], dav.url, session=dav_session(order[0].device_id))
    second = sync.push(order[1], dav.url, session=dav_session(order[1].device_id))
    assert second.conflicts == 1 and second.failed == 0
    lines = second.per_trip[0].conflicts
    # in words: the devices' names as set on them, never their ids
    assert lines and any("Tablet A" in line and "Tablet B" in line for line in lines)
    assert not any("tablet-A" in line or "stops[" in line for line in lines)
    assert len(lines) == 1 and "12.8 C" in lines[0] and "13.4 C" in lines[0]
    converge([device_a, device_b], dav.url)
    a, b = device_a.trip_document(t.id), device_b.trip_document(t.id)
    assert semantic(a) == semantic(b)
    assert device_a.load_trip(t.id).status == "needs attention"
    # both values are kept in the trip for a person to choose
    values = {s["value"]["value"] for c in a["conflicts"] for s in c["sides"] if c["path"].endswith(".temp")}
    assert values == {12.8, 13.4}
    state = {s.trip_id: s for s in sync.status(device_a)}[t.id]
    assert state.needs_attention and state.conflicts
    # the office sees the same, whichever order the tablets pushed in
    office = open_store(tmp_path / "office", "office-desk")
    sync.pull(office, dav.url, session=dav_session("office-desk"))
    o = office.trip_document(t.id)
    assert semantic(o)["stops"] == semantic(a)["stops"]
    assert {c["id"] for c in o["conflicts"]} == {c["id"] for c in a["conflicts"]}
