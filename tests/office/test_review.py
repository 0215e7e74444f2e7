"""Review and approval: states from events, the CLI, the approved-trip guard, and merge-safety."""

from __future__ import annotations

import json
from datetime import datetime, timedelta, timezone

import pytest

import sync
from core.records.models import ReviewEvent
from core.rules.review import ReviewRefused, approved_version, check_change, new_event, open_reasons, review_state
from core.store import ApprovedTrip
from tests.sync.conftest import edit_stop_notes, new_trip, open_store

T0 = datetime(2026, 7, 1, 9, 0, tzinfo=timezone.utc)


def _end(store, trip):  # noqa: ANN001
    return store.save_trip(trip.model_copy(update={"ended_at": trip.started_at + timedelta(hours=6)}), "trip ended")


def _step(store, tid, action, at, by="D.M.", **kw):  # noqa: ANN001
    trip = store.load_trip(tid)
    ev = new_event(trip, action, by=by, at=at, **kw)
    return store.save_trip(
        trip.model_copy(update={"review_events": [*trip.review_events, ReviewEvent.model_validate(ev, strict=False)]}),
        action,
    )


def test_states_follow_the_workflow(tmp_path):
    store = open_store(tmp_path / "office", "office-1")
    trip = new_trip(store, stops=2)
    assert review_state(trip) == "in progress"
    with pytest.raises(ReviewRefused, match="not ended"):
        new_event(trip, "approved", by="D.M.", at=T0)
    trip = _end(store, trip)
    assert review_state(trip) == "ended"
    assert store.list_trips()[0].review_state == "ended"
    trip = _step(store, trip.id, "returned", T0, reasons=["stop 2: DO reading has no unit"])
    assert review_state(trip) == "returned"
    assert open_reasons(trip) == ["stop 2: DO reading has no unit"]
    assert store.list_trips()[0].review_state == "returned"
    with pytest.raises(ReviewRefused, match="with the crew"):
        new_event(trip, "approved", by="D.M.", at=T0 + timedelta(minutes=1))
    trip = _step(store, trip.id, "resubmitted", T0 + timedelta(minutes=2), by="R.O.")
    assert review_state(trip) == "ended" and open_reasons(trip) == []
    trip = _step(store, trip.id, "reviewed", T0 + timedelta(minutes=3))
    trip = _step(store, trip.id, "approved", T0 + timedelta(minutes=4), comment="flags reviewed with the crew")
    assert review_state(trip) == "approved"
    ev = trip.review_events[-1]
    assert (ev.by, ev.comment, ev.action) == ("D.M.", "flags reviewed with the crew", "approved")


def test_return_needs_a_reason_and_a_name():
    doc = {"id": "t", "ended_at": "2026-07-01T15:00:00+00:00", "review_events": []}
    with pytest.raises(ReviewRefused, match="--reason"):
        new_event(doc, "returned", by="D.M.", at=T0, reasons=["  "])
    with pytest.raises(ReviewRefused, match="--by"):
        new_event(doc, "approved", by=" ", at=T0)


def test_an_approved_trip_changes_only_through_a_correction(tmp_path):
    store = open_store(tmp_path / "office", "office-1")
    trip = _end(store, new_trip(store, stops=2))
    trip = _step(store, trip.id, "approved", T0)
    before = store.trip_document(trip.id)
    with pytest.raises(ApprovedTrip, match="trip correct"):
        edit_stop_notes(store, trip.id, 0, "changed after approval")
    assert store.trip_document(trip.id) == before  # nothing half-written
    # a correction: the edit together with a 'corrected' event that keeps the approved version
    trip = store.load_trip(trip.id)
    stops = list(trip.stops)
    stops[0] = stops[0].model_copy(update={"notes": "gauge height was 0.42 m, not 0.24"})
    ev = new_event(
        trip,
        "corrected",
        by="D.M.",
        at=T0 + timedelta(hours=1),
        reasons=["meter reading entered at the wrong stop"],
        approved=before,
    )
    fixed = store.save_trip(
        trip.model_copy(
            update={
                "stops": stops,
                "review_events": [*trip.review_events, ReviewEvent.model_validate(ev, strict=False)],
            }
        ),
        "corrected",
    )
    assert review_state(fixed) == "reviewed"
    kept = approved_version(fixed.to_document())
    assert kept["stops"][0]["notes"] == before["stops"][0]["notes"] != fixed.stops[0].notes


def test_check_change_lets_review_steps_through():
    old = {
        "id": "t",
        "ended_at": "2026-07-01T15:00:00+00:00",
        "notes": "",
        "review_events": [{"id": "a", "action": "approved", "at": "2026-07-01T16:00:00+00:00", "by": "D.M."}],
    }
    check_change(old, {**old, "revision": 9, "audit": [{"id": "x"}]})  # bookkeeping only
    with pytest.raises(ReviewRefused):
        check_change(old, {**old, "notes": "edited"})


def test_steps_from_two_offices_merge_and_agree(tmp_path):
    """Two reviewers act on copies of one trip; after syncing both ways both hold both events and
    the same state (the later step decides; common practice for append-only logs)."""
    a = open_store(tmp_path / "a", "office-A")
    b = open_store(tmp_path / "b", "office-B")
    hub = tmp_path / "hub"
    hub.mkdir()
    trip = _end(a, new_trip(a, stops=1))
    sync.push(a, str(hub))
    sync.pull(b, str(hub))
    _step(a, trip.id, "reviewed", T0, by="A.K.")
    _step(b, trip.id, "returned", T0 + timedelta(minutes=5), by="B.L.", reasons=["post-trip check missing"])
    for store in (a, b, a):
        sync.push(store, str(hub))
        sync.pull(store, str(hub))
    sync.pull(b, str(hub))
    da, db = a.trip_document(trip.id), b.trip_document(trip.id)
    assert {e["by"] for e in da["review_events"]} == {"A.K.", "B.L."}
    assert sorted(e["id"] for e in da["review_events"]) == sorted(e["id"] for e in db["review_events"])
    assert review_state(da) == review_state(db) == "returned"
    assert not [c for c in da.get("conflicts") or [] if not c.get("resolved_at")]


def test_review_cli(tmp_path, cli):
    store = open_store(tmp_path / "office", "office-1")
    trip = _end(store, new_trip(store, stops=1))
    open_trip = new_trip(store, day=5, stops=1)
    d = tmp_path / "office"
    r = cli(
        "review",
        "return",
        trip.id[:8],
        "--by",
        "D.M.",
        "--reason",
        "stop 1: no DO bottle label",
        "--reason",
        "pre-trip calibration missing",
        data_dir=d,
    )
    assert r.returncode == 0, r.stderr
    assert "returned" in r.stdout and "no DO bottle label" in r.stdout
    r = cli("review", "list", "--state", "returned", "--json", data_dir=d)
    rows = json.loads(r.stdout)
    assert [x["id"] for x in rows] == [trip.id]
    r = cli("review", "approve", open_trip.id, "--by", "D.M.", data_dir=d)
    assert r.returncode == 2 and "not ended" in r.stderr and "Traceback" not in r.stderr
    r = cli("review", "approve", trip.id, "--by", "D.M.", data_dir=d)
    assert r.returncode == 2 and "resubmit" in r.stderr
    assert cli("review", "resubmit", trip.id, "--by", "R.O.", data_dir=d).returncode == 0
    r = cli("review", "approve", trip.id, "--by", "D.M.", "--comment", "fine", "--json", data_dir=d)
    assert r.returncode == 0 and json.loads(r.stdout)["state"] == "approved"
    r = cli("review", "show", trip.id, "--json", data_dir=d)
    shown = json.loads(r.stdout)
    assert [e["action"] for e in shown["events"]] == ["returned", "resubmitted", "approved"]
    r = cli("review", "list", "--json", data_dir=d)
    assert {x["id"]: x["state"] for x in json.loads(r.stdout)} == {trip.id: "approved", open_trip.id: "in progress"}
    # the text lists show times as `trip list` does, in the record's own offset and saying which
    # (common practice: a time without its zone is ambiguous once records travel)
    from core.records.messages import when_text

    assert when_text(trip.started_at) in cli("review", "list", data_dir=d).stdout
    assert " UTC" in cli("review", "show", trip.id, data_dir=d).stdout


def test_exports_and_reports_say_the_review_state(tmp_path, cli):
    """The season export carries each trip's state and can take only approved trips; the trip
    report names the last review step."""
    import csv

    from core.rules.review import describe

    store = open_store(tmp_path / "office", "office-1")
    done = _end(store, new_trip(store, day=3, stops=1))
    _step(store, done.id, "approved", T0, comment="checked")
    other = _end(store, new_trip(store, day=4, stops=1))
    assert describe(store.load_trip(done.id)).startswith("approved by D.M. on 2026-07-01")
    assert describe(store.load_trip(other.id)) == "ended, not reviewed yet"
    out = tmp_path / "season"
    r = cli("export", "season", "--out", str(out), "--state", "approved", data_dir=tmp_path / "office")
    assert r.returncode == 0, r.stderr
    rows = list(csv.DictReader((out / "stops.csv").open(encoding="utf-8")))
    assert {row["trip_id"] for row in rows} == {done.id}
    assert {row["review_state"] for row in rows} == {"approved"}
    assert r.stdout.rstrip().endswith("from 1 trip")  # the trips the filter kept, not the trips read
    r = cli("export", "season", "--out", str(tmp_path / "all"), data_dir=tmp_path / "office")
    rows = list(csv.DictReader((tmp_path / "all" / "stops.csv").open(encoding="utf-8")))
    assert {row["trip_id"]: row["review_state"] for row in rows} == {done.id: "approved", other.id: "ended"}
    r = cli("export", "season", "--out", str(tmp_path / "x"), "--state", "done", data_dir=tmp_path / "office")
    assert r.returncode == 2 and "--state" in r.stderr


def test_the_app_lists_a_returned_trip_first_with_the_reasons(tmp_path):
    """The tablet's trips screen (its controller, without a window) shows what the office asked."""
    from mobile.app.controller import AppController

    store = open_store(tmp_path / "tablet", "tablet-A")
    first = _end(store, new_trip(store, day=3, stops=1))
    later = _end(store, new_trip(store, day=9, stops=1))
    _step(store, first.id, "returned", T0, reasons=["stop 1: DO reading has no unit", "post-trip check missing"])
    _step(store, later.id, "approved", T0)
    lines = AppController(store).trip_lines()
    assert [ln.id for ln in lines] == [first.id, later.id]  # returned first, though older
    assert lines[0].status == "returned by the office"
    assert "stop 1: DO reading has no unit; post-trip check missing" in lines[0].detail
    assert lines[1].status == "approved"


def test_with_correction_is_the_hook_for_a_correction_command(tmp_path):
    from core.rules.review import with_correction

    store = open_store(tmp_path / "office", "office-1")
    trip = _end(store, new_trip(store, stops=1))
    assert with_correction(trip, store.trip_document(trip.id), reason="x", by="D.M.", at=T0) is trip
    _step(store, trip.id, "approved", T0)
    stored = store.trip_document(trip.id)
    edited = store.load_trip(trip.id).model_copy(update={"notes": "meter serial corrected"})
    fixed = store.save_trip(
        with_correction(edited, stored, reason="serial typed wrong", by="D.M.", at=T0 + timedelta(hours=1)), "corrected"
    )
    assert review_state(fixed) == "reviewed" and fixed.notes == "meter serial corrected"
    assert approved_version(fixed.to_document())["notes"] == stored["notes"]
