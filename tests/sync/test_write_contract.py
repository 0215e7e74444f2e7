"""Sync never writes blind: a lab result saved by another program while a pull or a push of the same
trip is in flight is merged with the hub's changes, never overwritten (real store, real wsgidav on
127.0.0.1; three-way merge with the copy sync read as the ancestor, common practice)."""

from datetime import timedelta

import pytest

import sync
import sync.targets
from core.records.models import Bottle
from core.rules.lab import record_winkler
from core.store import DeviceStore
from tests.sync.conftest import dav_session, edit_stop_notes, new_trip


def add_bottle(store, trip_id, label):
    trip = store.load_trip(trip_id)
    stop = trip.stops[0]
    bottle = Bottle(
        label=label, kind="do-fixed", collected_at=stop.arrived_at, fixed_at=stop.arrived_at + timedelta(minutes=2)
    )
    stops = [stop.model_copy(update={"bottles": list(stop.bottles) + [bottle]})] + list(trip.stops[1:])
    return store.save_trip(trip.model_copy(update={"stops": stops}), f"bottle {label}")


def record(store, trip_id, label, titrant_ml):
    """What `streamtab lab winkler` does: load, record, save (Standard Methods 4500-O C)."""
    trip = store.load_trip(trip_id)
    at = trip.stops[0].arrived_at + timedelta(hours=3)
    out = record_winkler(
        trip, label, titrant_ml=titrant_ml, titrated_ml=201.0, normality=0.025, analysed_at=at, now=at, analyst="J.M."
    )
    return store.save_trip(out.trip, f"lab: Winkler on bottle {label}")


# 8.2 mL of 0.025 N titrant on 201 mL titrated from a 300 mL bottle with 2 mL of reagents:
# DO = 8.2 * 0.025 * 8000 / (201 * 298 / 300) = 8.214 mg/L (Standard Methods 4500-O C)
EXPECTED_DO = pytest.approx(8.2 * 0.025 * 8000 / (201 * 298 / 300), rel=1e-6)


def results(doc):
    return [r["value"] for s in doc["stops"] for b in s["bottles"] for r in b["lab_results"]]


@pytest.mark.parametrize("operation", ["pull", "push"])
def test_a_lab_result_saved_during_a_sync_is_merged_never_lost(dav, device_a, device_b, monkeypatch, operation):
    t = new_trip(device_a, stops=2)
    add_bottle(device_a, t.id, "TV-0101")
    sync.push(device_a, dav.url, session=dav_session("tablet-A"))
    sync.pull(device_b, dav.url, session=dav_session("tablet-B"))
    edit_stop_notes(device_a, t.id, 1, "beaver dam upstream")  # a change B has not seen yet
    sync.push(device_a, dav.url, session=dav_session("tablet-A"))
    if operation == "push":  # B has something to send
        edit_stop_notes(device_b, t.id, 0, "fence down by the ford")

    # the lab bench on B's machine: another program with its own handle on the same store
    bench = DeviceStore.open(device_b.data_dir, "tablet-B")
    real_read = sync.targets.WebDavTarget.read
    fired = []

    def read_then_lab_saves(self, f, max_bytes):
        data = real_read(self, f, max_bytes)
        if not fired:  # sync has read the device copy and is fetching the hub's
            fired.append(record(bench, t.id, "TV-0101", 8.2).revision)
        return data

    monkeypatch.setattr(sync.targets.WebDavTarget, "read", read_then_lab_saves)
    if operation == "pull":
        report = sync.pull(device_b, dav.url, session=dav_session("tablet-B"))
        assert report.failed == 0 and report.quarantined == 0
    else:
        report = sync.push(device_b, dav.url, session=dav_session("tablet-B"))
        assert report.failed == 0
    assert fired
    doc = device_b.trip_document(t.id)
    assert results(doc) == [EXPECTED_DO]  # the lab result survived the sync
    assert doc["stops"][1]["notes"] == "beaver dam upstream"  # and the hub's change arrived
    assert not doc["conflicts"]
    if operation == "push":
        assert doc["stops"][0]["notes"] == "fence down by the ford"
    monkeypatch.undo()
    # after the next round the hub and tablet A have it too
    sync.push(device_b, dav.url, session=dav_session("tablet-B"))
    sync.pull(device_a, dav.url, session=dav_session("tablet-A"))
    assert results(device_a.trip_document(t.id)) == [EXPECTED_DO]


def test_adopt_document_keeps_bytes_and_refuses_stale_or_lossy_writes(device_a, tmp_path):
    from core.store import StaleTrip
    from core.store.atomic import canonical_json_bytes

    t = new_trip(device_a, stops=1)
    doc = device_a.trip_document(t.id)
    other = DeviceStore.open(tmp_path / "other", "tablet-B")
    other.adopt_document(doc, expected_revision=None)
    assert canonical_json_bytes(other.trip_document(t.id)) == canonical_json_bytes(doc)
    newer = device_a.trip_document(edit_stop_notes(device_a, t.id, 0, "riffle").id)
    with pytest.raises(StaleTrip):  # based on a revision no longer stored
        other.adopt_document(newer, expected_revision=doc["revision"] - 1)
    edit_stop_notes(other, t.id, 0, "pool")  # a save the newer copy lacks
    mine = other.trip_document(t.id)
    assert other.adopt_document(newer, expected_revision=mine["revision"]) is None
    assert other.trip_document(t.id) == mine  # nothing written
