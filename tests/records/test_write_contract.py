"""The write contract of the device store: every write names the revision it read, a stale write is
refused, a foreign version is merged under the store's lock (never replacing what is stored), an
import keeps lab results, and the audit keeps the value each change replaced. Real store on disk,
real CLI in a fresh interpreter (common practice: optimistic concurrency, as HTTP If-Match)."""

from __future__ import annotations

import copy
import json
import subprocess
import sys
import threading
import time
from datetime import timedelta
from pathlib import Path

import pytest

from core.records.models import AUDIT_VALUE_BYTES
from core.rules.lab import record_winkler
from core.store import DeviceStore, InvalidRecord, StaleTrip
from tests.conftest import ROOT, cli_env, run_cli
from tests.records.conftest import T0, FakeClock, make_bottle, make_cal, make_stop, make_trip

SAMPLES = ROOT / "sample_trips"
HOT = "a41f6e2d-8c3b-4d7a-b5e9-0c6d2f8e1a34"  # sample trip of 2026-06-23 (invented)


def winkler(trip, label="TV-0001", titrant_ml=8.2):
    """A Winkler result as `streamtab lab winkler` records it (Standard Methods 4500-O C)."""
    at = trip.stops[0].arrived_at + timedelta(hours=2)
    return record_winkler(
        trip, label, titrant_ml=titrant_ml, titrated_ml=201.0, normality=0.025, analysed_at=at, now=at, analyst="J.M."
    ).trip


def results(trip):
    return [r.value for s in trip.stops for b in s.bottles for r in b.lab_results]


def fixed_bottle(label="TV-0001"):
    stop = make_stop()
    return make_stop(
        bottles=[make_bottle(label, kind="do-fixed", at=stop.arrived_at, fixed=stop.arrived_at + timedelta(minutes=2))]
    )


# ---- stale writes ------------------------------------------------------------------------------
def test_a_write_based_on_an_old_revision_is_refused_and_nothing_changes(store):
    trip = store.save_trip(make_trip([make_stop()]), "new")
    doc = store.trip_document(trip.id)
    store.save_trip(trip.model_copy(update={"notes": "saved by the app"}), "app")
    stale = dict(copy.deepcopy(doc), meter_id="DO-METER-07")
    before = store.trip_document(trip.id)
    with pytest.raises(StaleTrip) as info:
        store.put_document(stale, "sync", expected_revision=1)
    assert "changed elsewhere" in str(info.value) and "\n" not in str(info.value)
    assert store.trip_document(trip.id) == before
    with pytest.raises(StaleTrip):  # the same rule for a Trip loaded before the app's save
        store.save_trip(trip.model_copy(update={"meter_id": "DO-METER-07"}), "late form")
    with pytest.raises(StaleTrip):  # a new trip that is already on the device
        store.put_document(doc, "import", expected_revision=None)
    assert store.trip_document(trip.id) == before


def test_a_sync_that_read_before_a_lab_save_merges_and_loses_nothing(store):
    """The case of issue 8: sync reads, a lab result is saved, sync writes its merge."""
    trip = store.save_trip(make_trip([fixed_bottle()]), "new")
    read_by_sync = store.trip_document(trip.id)
    hub = copy.deepcopy(read_by_sync)  # another device's later version
    hub["notes"] = "flow gauge read 0.42 m"
    hub["audit"] = hub["audit"] + [
        {"id": "hub-save-1", "at": "2026-06-14T12:00:00Z", "device_id": "dev-b", "change": "notes", "revision": 2}
    ]
    hub["revision"] = 2
    lab = store.update_trip(trip.id, "lab: Winkler", winkler)  # saved while sync is in flight
    assert results(lab)
    out = store.merge_document(hub, "merged with the hub's version", base=read_by_sync)
    assert out.result == "merged" and out.conflicts == []
    stored = store.load_trip(trip.id)
    assert stored.notes == "flow gauge read 0.42 m"
    assert results(stored) == results(lab)  # the lab result is still there
    assert {"hub-save-1"} <= {a.id for a in stored.audit}


def test_update_trip_is_atomic_between_threads(store):
    trip = store.save_trip(make_trip([make_stop()]), "new")

    def add_note(n):
        def fn(t):
            return t.model_copy(update={"notes": (t.notes + f" {n}").strip()})

        for _ in range(5):  # bounded
            store.update_trip(trip.id, f"note {n}", fn)

    threads = [threading.Thread(target=add_note, args=(n,)) for n in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=120)
    notes = store.load_trip(trip.id).notes.split()
    assert sorted(notes) == sorted(str(n) for n in range(4) for _ in range(5))  # 20 writes, 0 lost
    assert store.load_trip(trip.id).revision == 21


def _waiting_for_the_lock(child: subprocess.Popen, deadline_s: float = 60.0) -> None:
    """Returns once the child process sleeps between tries of the store's lock (filelock polls
    with time.sleep; Linux shows it as a nanosleep in /proc/PID/wchan). Bounded."""
    wchan = Path(f"/proc/{child.pid}/wchan")
    end = time.monotonic() + deadline_s
    while time.monotonic() < end:
        assert child.poll() is None, child.communicate()[1]
        if "nanosleep" in wchan.read_text():
            return
        time.sleep(0.01)
    raise AssertionError("the command never waited for the store's lock")


def _custody_added(trip):
    return [(c.relinquished_by, c.received_by) for c in trip.custody] == [("R.O.", "Lab intake")]


def _approved(trip):
    return [e.action for e in trip.review_events] == ["approved"]


@pytest.mark.skipif(not Path("/proc/self/wchan").exists(), reason="needs Linux /proc to see the wait")
@pytest.mark.parametrize(
    ("argv", "landed"),
    [
        (["custody", "add", "{trip}", "--from", "R.O.", "--to", "Lab intake"], _custody_added),
        (["review", "approve", "{trip}", "--by", "D.M."], _approved),
    ],
    ids=["custody add", "review approve"],
)
def test_two_writers_a_cli_command_waiting_on_the_lock_keeps_the_other_change(store, argv, landed):
    """Two real writers on one store folder: this process saves a note while `streamtab ARGS`, in
    its own interpreter, waits for the store's lock. The command's change is applied to the trip as
    stored after the note, so neither change is lost (common practice: read–modify–write under
    one lock; a write based on an older read would be refused as stale, not applied)."""
    stop = make_stop(bottles=[make_bottle("TV-0001")])
    trip = store.save_trip(make_trip([stop], ended_at=T0 + timedelta(hours=5)), "new")
    args = [a.replace("{trip}", trip.id) for a in argv]
    with store.locked():
        child = subprocess.Popen(
            [sys.executable, "-m", "mobile.cli", *args, "--data-dir", str(store.data_dir)],
            cwd=ROOT,
            env=cli_env(),
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
        )
        try:
            _waiting_for_the_lock(child)
            noted = store.update_trip(
                trip.id, "notes", lambda t: t.model_copy(update={"notes": "flow gauge read 0.42 m"})
            )
        except BaseException:
            child.kill()
            raise
    _, err = child.communicate(timeout=120)
    assert child.returncode == 0, err
    stored = store.load_trip(trip.id)
    assert stored.notes == "flow gauge read 0.42 m"  # the first writer's change is still there
    assert landed(stored)  # and the command's change landed on top of it
    assert stored.revision == noted.revision + 1


def test_six_commands_started_together_all_land(store):
    """Six real `streamtab custody add` processes on one trip at once: each reads and writes under
    the store's lock, so all six hand-offs are stored and none is refused as stale (common
    practice: read–modify–write under one lock). A command that read outside the lock would meet
    the others' saves and be refused."""
    trip = store.save_trip(make_trip([make_stop(bottles=[make_bottle("TV-0001")])]), "new")
    children = [
        subprocess.Popen(
            [
                sys.executable,
                "-m",
                "mobile.cli",
                "custody",
                "add",
                trip.id,
                "--from",
                f"Courier {n}",
                "--to",
                f"Desk {n}",
            ]
            + ["--data-dir", str(store.data_dir)],
            cwd=ROOT,
            env=cli_env(),
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
        )
        for n in range(6)
    ]
    errors = [c.communicate(timeout=120)[1] for c in children]
    assert [c.returncode for c in children] == [0] * 6, errors
    stored = store.load_trip(trip.id)
    assert sorted(c.relinquished_by for c in stored.custody) == [f"Courier {n}" for n in range(6)]
    assert stored.revision == trip.revision + 6


def test_update_trip_that_fails_writes_nothing(store):
    trip = store.save_trip(make_trip([make_stop()]), "new")
    before = store.trip_document(trip.id)

    def boom(t):
        raise ValueError("the analyst's entry was refused")

    with pytest.raises(ValueError):
        store.update_trip(trip.id, "x", boom)
    with pytest.raises(InvalidRecord):
        store.update_trip(trip.id, "x", lambda t: t.model_copy(update={"id": "another"}))
    assert store.trip_document(trip.id) == before


# ---- merging foreign versions --------------------------------------------------------------------
def test_an_older_or_equal_version_changes_nothing_and_a_newer_one_fast_forwards(store, tmp_path):
    trip = store.save_trip(make_trip([make_stop()]), "new")
    old = store.trip_document(trip.id)
    trip = store.save_trip(trip.model_copy(update={"notes": "second save"}), "edit")
    now = store.trip_document(trip.id)
    for version in (old, now):
        out = store.merge_document(copy.deepcopy(version), "import")
        assert out.result == "unchanged" and store.trip_document(trip.id) == now
    other = DeviceStore.open(tmp_path / "b", device_id="dev-b", clock=FakeClock())
    other.save_sites(store.sites())
    assert other.merge_document(copy.deepcopy(now), "import").result == "new"
    later = other.update_trip(trip.id, "meter", lambda t: t.model_copy(update={"meter_id": "DO-METER-09"}))
    out = store.merge_document(later.to_document(), "import")
    assert out.result == "fast-forward" and out.trip.meter_id == "DO-METER-09"
    assert out.trip.notes == "second save"


def test_a_merge_never_removes_lab_results_calibrations_or_custody(store):
    trip = store.save_trip(make_trip([fixed_bottle()], pre_calibration=make_cal()), "new")
    doc = store.trip_document(trip.id)
    stored = store.update_trip(trip.id, "lab", winkler)
    foreign = copy.deepcopy(doc)  # a diverged copy that lost the calibration
    foreign["pre_calibration"] = None
    foreign["notes"] = "edited elsewhere"
    foreign["audit"] = foreign["audit"] + [
        {"id": "x-1", "at": "2026-06-14T12:00:00Z", "device_id": "dev-x", "change": "edit", "revision": 2}
    ]
    out = store.merge_document(foreign, "import", base=doc)
    assert out.trip.pre_calibration is not None and out.trip.pre_calibration.id == trip.pre_calibration.id
    assert results(out.trip) == results(stored)
    assert out.trip.notes == "edited elsewhere"


# ---- the audit keeps what each change replaced -------------------------------------------------
def test_audit_keeps_old_and_new_values_bounded(store):
    trip = store.save_trip(make_trip([make_stop()]), "new")
    stop_id = trip.stops[0].id
    trip = store.save_stop(trip.id, trip.stops[0].model_copy(update={"notes": "riffle"}))
    entry = trip.audit[-1]
    assert [(c.path, c.old, c.new) for c in entry.changes] == [(f"stops[{stop_id}].notes", "", "riffle")]
    long = "x" * (AUDIT_VALUE_BYTES * 3)
    trip = store.save_trip(trip.model_copy(update={"notes": long}), "long notes")
    change = trip.audit[-1].changes[0]
    assert change.path == "notes" and change.old == "" and change.truncated
    assert len(json.dumps(change.new)) < AUDIT_VALUE_BYTES + 20
    # the typed text of a reading is read back from the audit
    q = make_stop(temp="12,5 °C").temp
    trip = store.save_stop(trip.id, trip.stops[0].model_copy(update={"temp": q}))
    change = trip.audit[-1].changes[0]
    assert change.old["text"] == "18.5" and change.new["text"] == "12,5 °C"


# ---- `streamtab trip import` merges ----------------------------------------------------------------
def test_cli_reimport_keeps_the_lab_result(tmp_path):
    data = tmp_path / "data"
    assert run_cli("sites", "import", str(SAMPLES / "sites.csv"), data_dir=data).returncode == 0
    sample = next(f for f in sorted(SAMPLES.glob("trip-*.json")) if HOT in f.read_text(encoding="utf-8"))
    assert run_cli("trip", "import", str(sample), data_dir=data).returncode == 0
    exported = tmp_path / "before-lab.json"
    r = run_cli("trip", "export", HOT[:8], "--format", "json", "--out", str(exported), data_dir=data)
    assert r.returncode == 0, r.stderr
    r = run_cli(
        "lab",
        "winkler",
        HOT[:8],
        "TV-0701",
        "--titrant-ml",
        "12.1",
        "--normality",
        "0.025",
        "--titrated-ml",
        "201",
        "--at",
        "2026-06-23T14:00-07:00",
        "--json",
        data_dir=data,
    )
    assert r.returncode == 0, r.stderr
    result_id = json.loads(r.stdout)["result"]["id"]
    for f in (exported, sample):  # an older export and the original file
        r = run_cli("trip", "import", str(f), "--json", data_dir=data)
        assert r.returncode == 0, r.stderr
        assert json.loads(r.stdout)["result"] == "unchanged"
    r = run_cli("lab", "results", HOT[:8], "--json", data_dir=data)
    assert r.returncode == 0, r.stderr
    assert "no lab results yet" not in r.stdout
    text = json.dumps(json.loads(r.stdout))
    assert "TV-0701" in text and result_id in text


# ---- drafts stay on the device ------------------------------------------------------------------
def test_drafts_stay_out_of_the_trip_file_and_survive_saves_and_merges(store):
    trip = store.save_trip(make_trip([make_stop()]), "new")
    stop = trip.stops[0].model_copy(update={"draft_text": {"temp": "68 °C"}})  # a refused entry, kept
    saved = store.save_stop(trip.id, stop)
    assert saved.stops[0].model_extra["draft_text"] == {"temp": "68 °C"}
    doc = store.trip_document(trip.id)  # what sync and exports read
    assert "draft_text" not in json.dumps(doc)
    assert store.load_trip(trip.id).stops[0].model_extra["draft_text"] == {"temp": "68 °C"}
    foreign = copy.deepcopy(doc)  # another device's later version
    foreign["notes"] = "from the office"
    foreign["audit"] = foreign["audit"] + [
        {"id": "o-1", "at": "2026-06-14T12:00:00Z", "device_id": "dev-o", "change": "notes", "revision": 3}
    ]
    store.merge_document(foreign, "pulled")
    again = store.load_trip(trip.id)
    assert again.notes == "from the office" and again.stops[0].model_extra["draft_text"] == {"temp": "68 °C"}
    cleared = again.stops[0].model_copy()
    cleared.__pydantic_extra__.pop("draft_text")  # the form now accepted the value
    store.save_stop(trip.id, cleared)
    assert "draft_text" not in (store.load_trip(trip.id).stops[0].model_extra or {})
