"""Conflicts and corrections in words, on a real device store: a conflict lists its site, stop
number, field label, each value with its unit, the device's name and when; settling it (keep a
value or type one) is recorded in the trip and survives merging in either order; two live results
of one analysis on one bottle are a conflict settled the same way; a correction is audited with
its reason (common practice: keep every version, let a person choose, record who and why)."""

from __future__ import annotations

import copy
import json
from datetime import UTC, datetime, timedelta

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from core.records.merge import merge_trips
from core.records.models import Trip
from core.rules.conflicts import ConflictError, correct, list_conflicts, settle, settle_document
from core.rules.lab import record_winkler
from core.store import DeviceStore
from tests.conftest import run_cli
from tests.records.conftest import FakeClock, make_bottle, make_stop, make_trip

AT = datetime(2026, 6, 14, 18, 0, tzinfo=UTC)


def two_devices(tmp_path, store):
    """Device A (the fixture store, 'Tablet A') and B ('Tablet B') holding the same trip."""
    store.set_device_name("Tablet A")
    other = DeviceStore.open(tmp_path / "b", device_id="dev-test-b", clock=FakeClock(AT))
    other.save_sites(store.sites())
    other.set_device_name("Tablet B")
    stop = make_stop(site="LK-03", bottles=[make_bottle("TV-0001", kind="do-fixed", fixed=None)])
    first = make_stop(site="LK-01")
    trip = store.save_trip(
        make_trip([first, stop.model_copy(update={"arrived_at": first.arrived_at + timedelta(hours=1)})]), "new"
    )
    other.merge_document(store.trip_document(trip.id), "pulled")
    return store, other, trip.id


def set_temp(store, trip_id, index, text):
    from core.records.models import measure

    def fn(t):
        stops = sorted(t.stops, key=lambda s: s.arrived_at)
        target = stops[index].model_copy(update={"temp": measure("temp", text)})
        return t.model_copy(update={"stops": [target if s.id == target.id else s for s in t.stops]})

    return store.update_trip(trip_id, f"temp {text}", fn)


def pull(into, from_store, trip_id, base):
    return into.merge_document(from_store.trip_document(trip_id), "pulled", base=base)


def test_a_conflict_reads_in_words(tmp_path, store):
    a, b, tid = two_devices(tmp_path, store)
    base = a.trip_document(tid)
    set_temp(a, tid, 1, "12,8 °C")
    set_temp(b, tid, 1, "13.4")
    out = pull(a, b, tid, base)
    assert out.result == "merged" and len(out.conflicts) == 1
    (view,) = list_conflicts(out.trip, this_device=a.device_id)
    assert (view.number, view.stop, view.site_id, view.label) == (1, 2, "LK-03", "Water temperature")
    assert [v["text"] for v in view.values] == ["12,8 °C", "13.4 °C"] or [v["text"] for v in view.values] == [
        "13.4 °C",
        "12,8 °C",
    ]
    assert {v["device"] for v in view.values} == {"Tablet A", "Tablet B"}
    assert all(v["at"] for v in view.values)
    for text in (view.message, json.dumps(view.to_dict()["message"])):
        assert "dev-test" not in text and "stops[" not in text and "{" not in text
    assert "LK-03 (stop 2)" in view.message and "Water temperature" in view.message
    assert set(view.to_dict()) >= {"id", "stop", "field", "values", "message"}


def test_settle_keep_records_who_and_clears_attention(tmp_path, store):
    a, b, tid = two_devices(tmp_path, store)
    base = a.trip_document(tid)
    set_temp(a, tid, 1, "12.8")
    set_temp(b, tid, 1, "13.4")
    trip = pull(a, b, tid, base).trip
    assert trip.status == "needs attention"
    (view,) = list_conflicts(trip)
    keep = next(v["n"] for v in view.values if v["device"] == "Tablet B")
    saved = a.update_trip(tid, "settled", lambda t: settle(t, "1", keep=keep, by="M.K.", at=AT), by="M.K.")
    assert saved.status != "needs attention" and a.list_trips()[0].open_conflicts == 0
    stop = sorted(saved.stops, key=lambda s: s.arrived_at)[1]
    assert stop.temp.value == pytest.approx(13.4)
    c = saved.conflicts[0]
    assert c.resolved_by == "M.K." and c.resolved_at == AT and c.resolution["kept"] == keep
    assert saved.audit[-1].by == "M.K." and saved.audit[-1].device_name == "Tablet A"
    # B pulls the settlement: settled there too, nothing reopened
    b_now = pull(b, a, tid, None).trip
    assert b_now.status != "needs attention" and not b_now.open_conflicts
    assert sorted(b_now.stops, key=lambda s: s.arrived_at)[1].temp.value == pytest.approx(13.4)


def test_settle_with_a_typed_value_uses_the_apps_rules(tmp_path, store):
    a, b, tid = two_devices(tmp_path, store)
    base = a.trip_document(tid)
    set_temp(a, tid, 1, "12.8")
    set_temp(b, tid, 1, "13.4")
    trip = pull(a, b, tid, base).trip
    with pytest.raises(ConflictError) as info:
        settle(trip, "1", value="68 °C", by="M.K.", at=AT)  # out of the accepted range
    assert "Water temperature" in str(info.value)
    settled = settle(trip, "1", value="13,1", by="M.K.", at=AT)  # decimal comma, °C by default
    stop = sorted(settled.stops, key=lambda s: s.arrived_at)[1]
    assert stop.temp.text == "13,1 °C" and stop.temp.value == pytest.approx(13.1)
    with pytest.raises(ConflictError):
        settle(trip, "9", keep=1, by="M.K.", at=AT)
    with pytest.raises(ConflictError):
        settle(trip, "1", keep=1, value="13", by="M.K.", at=AT)


def winkler(trip, titrant_ml):
    at = trip.stops[0].arrived_at + timedelta(hours=2)
    return record_winkler(
        trip,
        "TV-0001",
        titrant_ml=titrant_ml,
        titrated_ml=201.0,
        normality=0.025,
        analysed_at=at,
        now=at,
        analyst="J.M.",
    ).trip


def test_two_live_results_from_two_machines_are_a_conflict_settled_the_same_way(tmp_path, store):
    a, b, tid = two_devices(tmp_path, store)
    base = a.trip_document(tid)
    a.update_trip(tid, "lab", lambda t: winkler(t, 8.2))  # Standard Methods 4500-O C
    b.update_trip(tid, "lab", lambda t: winkler(t, 8.4))
    out = pull(a, b, tid, base)
    (view,) = list_conflicts(out.trip)
    assert view.kind == "results" and "Winkler DO result of bottle TV-0001" in view.message
    assert len(view.values) == 2 and out.trip.status == "needs attention"
    keep = next(v["n"] for v in view.values if v["device"] == "Tablet B")
    saved = a.update_trip(tid, "settled", lambda t: settle(t, view.id, keep=keep, by="J.M.", at=AT))
    results = [r for s in saved.stops for bt in s.bottles for r in bt.lab_results]
    live = [r for r in results if r.live]
    assert len(results) == 2 and len(live) == 1 and live[0].inputs["used"]["titrant_ml"] == 8.4
    gone = next(r for r in results if not r.live)
    assert gone.superseded_by == live[0].id and "J.M." in gone.superseded_reason
    assert saved.status != "needs attention"
    b_now = pull(b, a, tid, None).trip
    assert b_now.status != "needs attention"
    assert [r.live for s in b_now.stops for bt in s.bottles for r in bt.lab_results].count(True) == 1


def test_correction_is_audited_with_reason_and_old_value(store):
    trip = store.save_trip(make_trip([make_stop(temp="18.5")]), "new")
    with pytest.raises(ConflictError) as info:
        correct(trip, 1, "do_sat_mg_l", "9")
    assert "computed" in str(info.value)
    with pytest.raises(ConflictError):
        correct(trip, 2, "water_temp_c", "12")
    saved = store.update_trip(
        trip.id,
        "correction",
        lambda t: correct(t, 1, "water_temp_c", "17,5")[0],
        by="Office (M.K.)",
        reason="meter read in °F, converted",
    )
    assert saved.stops[0].temp.text == "17,5 °C"
    entry = saved.audit[-1]
    assert entry.reason == "meter read in °F, converted" and entry.by == "Office (M.K.)"
    (change,) = [c for c in entry.changes if c.path.endswith(".temp")]
    assert change.old["text"] == "18.5" and change.new["text"] == "17,5 °C"


# ---- settling and merging commute (property) ----------------------------------------------------
EDITABLE = ("notes", "weather", "flow")


def _doc(notes_a, notes_b, other_edits):
    """A merged trip with one open conflict on stop 1's notes, and another device's later edits."""
    base = make_trip(
        [make_stop(id="00000000-0000-4000-8000-000000000001")], id="5f0901de-c1b3-4a79-aaa5-95b642d7d1c1"
    ).to_document()
    base["audit"] = [{"id": "a0", "at": "2026-06-14T09:00:00Z", "device_id": "dev-A", "change": "new", "revision": 1}]
    a, b = copy.deepcopy(base), copy.deepcopy(base)
    a["stops"][0]["notes"], b["stops"][0]["notes"] = notes_a, notes_b
    a["audit"] = a["audit"] + [
        {
            "id": "a1",
            "at": "2026-06-14T10:00:00Z",
            "device_id": "dev-A",
            "change": "x",
            "device_name": "Tablet A",
            "revision": 2,
        }
    ]
    b["audit"] = b["audit"] + [
        {
            "id": "b1",
            "at": "2026-06-14T10:05:00Z",
            "device_id": "dev-B",
            "change": "y",
            "device_name": "Tablet B",
            "revision": 2,
        }
    ]
    a["updated_at"], b["updated_at"] = "2026-06-14T10:00:00Z", "2026-06-14T10:05:00Z"
    merged = merge_trips(base, a, b).doc
    later = copy.deepcopy(merged)  # another device's edits made after the merge
    for key, value in other_edits.items():
        later["stops"][0][key] = value
    later["audit"] = later["audit"] + [
        {"id": "c1", "at": "2026-06-14T11:00:00Z", "device_id": "dev-C", "change": "z", "revision": 3}
    ]
    later["updated_at"] = "2026-06-14T11:00:00Z"
    return merged, later


def _content(doc):
    return {k: v for k, v in doc.items() if k not in ("revision", "updated_at", "audit")}


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    notes_a=st.text(min_size=1, max_size=12),
    notes_b=st.text(min_size=1, max_size=12),
    other=st.dictionaries(st.sampled_from(("weather", "flow")), st.text(max_size=10), max_size=2),
    keep=st.sampled_from((1, 2)),
    settle_first=st.booleans(),
)
def test_settling_and_merging_commute(notes_a, notes_b, other, keep, settle_first):
    if notes_a == notes_b:
        return
    merged, later = _doc(notes_a, notes_b, other)
    # order 1: settle on this device, then merge the other device's later version in
    settled = settle_document(merged, "1", keep=keep, by="M.K.", at=AT)
    one = merge_trips(merged, settled, later).doc if settle_first else merge_trips(merged, later, settled).doc
    # order 2: merge first, then settle the same conflict
    two = settle_document(merge_trips(merged, merged, later).doc, "1", keep=keep, by="M.K.", at=AT)
    assert _content(one) == _content(two)
    assert not [c for c in one["conflicts"] if not c.get("resolved_at")]
    assert Trip.from_document(one).status != "needs attention"


# ---- the command line ----------------------------------------------------------------------------
def test_cli_conflicts_settle_and_correct(tmp_path, store):
    a, b, tid = two_devices(tmp_path, store)
    base = a.trip_document(tid)
    set_temp(a, tid, 1, "12.8")
    set_temp(b, tid, 1, "13.4")
    pull(a, b, tid, base)
    data = a.data_dir
    r = run_cli("trip", "conflicts", tid[:8], "--json", data_dir=data)
    assert r.returncode == 0, r.stderr
    (c,) = json.loads(r.stdout)
    assert {"id", "stop", "field", "values", "message"} <= set(c) and c["stop"] == 2
    assert {v["device"] for v in c["values"]} == {"Tablet A", "Tablet B"}
    r = run_cli("trip", "conflicts", tid[:8], data_dir=data)
    assert r.returncode == 0 and "Water temperature" in r.stdout and "dev-test" not in r.stdout
    r = run_cli("trip", "settle", tid[:8], "1", "--keep", "5", data_dir=data)
    assert r.returncode == 2 and "--keep 5" in r.stderr and "Traceback" not in r.stderr
    r = run_cli("trip", "settle", tid[:8], "1", "--value", "13.0", "--by", "M.K.", "--json", data_dir=data)
    assert r.returncode == 0, r.stderr
    out = json.loads(r.stdout)
    assert out["needs_attention"] is False and out["open_conflicts"] == 0
    r = run_cli("trip", "show", tid[:8], "--json", data_dir=data)
    shown = json.loads(r.stdout)
    assert shown["status"] != "needs attention"
    assert [(x["number"], x["site_id"]) for x in shown["stops"]] == [(1, "LK-01"), (2, "LK-03")]
    r = run_cli("trip", "show", tid[:8], data_dir=data)
    assert "stop 2: LK-03" in r.stdout  # the numbers --stop and the conflicts use
    r = run_cli(
        "trip",
        "correct",
        tid[:8],
        "--stop",
        "1",
        "--field",
        "meter_do_value",
        "--value",
        "8,9",
        "--reason",
        "reading entered at the wrong stop",
        "--by",
        "M.K.",
        data_dir=data,
    )
    assert r.returncode == 0, r.stderr
    trip = DeviceStore.open(data).load_trip(tid)
    assert sorted(trip.stops, key=lambda s: s.arrived_at)[0].do.text == "8,9 mg/L"
    assert trip.audit[-1].reason == "reading entered at the wrong stop" and trip.audit[-1].by == "M.K."
    r = run_cli(
        "trip",
        "correct",
        tid[:8],
        "--stop",
        "1",
        "--field",
        "do_sat_mg_l",
        "--value",
        "9",
        "--reason",
        "x",
        data_dir=data,
    )
    assert r.returncode == 2 and "computed" in r.stderr and len(r.stderr.strip().splitlines()) == 1


def test_cli_correct_on_an_approved_trip_adds_the_review_correction(tmp_path):
    from core.rules.review import approved_version, new_event, review_state
    from tests.sync.conftest import new_trip, open_store

    store = open_store(tmp_path / "office", "office-1")
    trip = new_trip(store, stops=1)
    trip = store.save_trip(trip.model_copy(update={"ended_at": trip.started_at + timedelta(hours=6)}), "ended")
    ev = new_event(trip, "approved", by="D.M.", at=AT)
    store.update_trip(trip.id, "approved", lambda t: Trip.from_document({**t.to_document(), "review_events": [ev]}))
    before = store.trip_document(trip.id)
    r = run_cli(
        "trip",
        "correct",
        trip.id[:8],
        "--stop",
        "1",
        "--field",
        "notes",
        "--value",
        "gauge 0.42 m",
        "--reason",
        "reading entered at the wrong stop",
        "--by",
        "D.M.",
        data_dir=tmp_path / "office",
    )
    assert r.returncode == 0, r.stderr
    doc = DeviceStore.open(tmp_path / "office").trip_document(trip.id)
    assert review_state(doc) == "reviewed" and doc["stops"][0]["notes"] == "gauge 0.42 m"
    assert approved_version(doc)["stops"][0]["notes"] == before["stops"][0]["notes"]
    assert doc["review_events"][-1]["reasons"] == ["reading entered at the wrong stop"]
