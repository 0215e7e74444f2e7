"""A conflict settled on one device stays settled on every device, whichever order the devices
sync in: real stores and a real WebDAV server (wsgidav) on 127.0.0.1 (common practice: a
settlement is a change like any other and travels with the trip)."""

from datetime import UTC, datetime

import pytest

import sync
from core.rules.conflicts import list_conflicts, settle
from tests.sync.conftest import converge, dav_session, edit_stop_notes, edit_stop_temp, new_trip, open_store


@pytest.mark.parametrize("order", ["settle-then-edit", "edit-then-settle"])
def test_a_settled_conflict_is_settled_on_every_device(dav, device_a, device_b, tmp_path, order):
    device_a.set_device_name("Tablet A")
    device_b.set_device_name("Tablet B")
    t = new_trip(device_a, stops=2)
    sync.push(device_a, dav.url, session=dav_session("tablet-A"))
    sync.pull(device_b, dav.url, session=dav_session("tablet-B"))
    edit_stop_temp(device_a, t.id, 1, "12.8 C")
    edit_stop_temp(device_b, t.id, 1, "13.4 C")
    converge([device_a, device_b], dav.url)
    assert device_a.load_trip(t.id).status == "needs attention"
    (view,) = list_conflicts(device_a.load_trip(t.id))
    keep = next(v["n"] for v in view.values if v["device"] == "Tablet B")
    at = datetime(2026, 6, 3, 18, 0, tzinfo=UTC)

    def settle_on_a():
        device_a.update_trip(
            t.id, "conflict settled", lambda tr: settle(tr, "1", keep=keep, by="M.K.", at=at), by="M.K."
        )

    if order == "settle-then-edit":
        settle_on_a()
        sync.push(device_a, dav.url, session=dav_session("tablet-A"))
        edit_stop_notes(device_b, t.id, 0, "cattle upstream")  # B has not pulled the settlement
    else:
        edit_stop_notes(device_b, t.id, 0, "cattle upstream")
        sync.push(device_b, dav.url, session=dav_session("tablet-B"))
        settle_on_a()  # A has not pulled B's edit
    converge([device_a, device_b], dav.url)
    office = open_store(tmp_path / "office", "office-desk")
    sync.pull(office, dav.url, session=dav_session("office-desk"))
    for d in (device_a, device_b, office):
        trip = d.load_trip(t.id)
        assert trip.status != "needs attention" and not trip.open_conflicts, d.device_id
        temps = {s.site_id: s.temp.value for s in trip.stops if s.temp is not None}
        assert 13.4 in temps.values() and 12.8 not in temps.values()
        assert any(s.notes == "cattle upstream" for s in trip.stops)
        (c,) = [c for c in trip.conflicts if c.id == view.id]
        assert c.resolved_by == "M.K."
    states = {s.trip_id: s for s in sync.status(office)}
    assert not states[t.id].needs_attention
