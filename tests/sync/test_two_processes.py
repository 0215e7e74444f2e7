"""Two processes on one device store: a lab bench records Winkler results in a loop while a sync
loop pulls and pushes the same trip (merging another tablet's edits) against a real wsgidav on
127.0.0.1, for a bounded number of rounds. Every acknowledged result ends in the store and at the
hub: none lost (one write contract under the store's lock; common practice)."""

import json
import subprocess
import sys
from datetime import timedelta

import sync
from core.records.models import Bottle
from core.store import DeviceStore
from core.store.atomic import canonical_json_bytes
from sync.layout import revision_name
from tests.conftest import ROOT, cli_env
from tests.sync.conftest import dav_session, hub_files, new_trip, open_store

LAB_ROUNDS = 24
SYNC_ROUNDS = 12


def result_ids(doc):
    return {r["id"] for s in doc["stops"] for b in s["bottles"] for r in b["lab_results"]}


def test_lab_results_recorded_during_sync_loops_are_never_lost(dav, tmp_path):
    a = open_store(tmp_path / "tablet-a", "tablet-A")
    b = open_store(tmp_path / "tablet-b", "tablet-B")
    t = new_trip(b, stops=3)
    trip = b.load_trip(t.id)
    stops = []
    for n, stop in enumerate(trip.stops):
        bottle = Bottle(
            label=f"TV-02{n:02d}",
            kind="do-fixed",
            collected_at=stop.arrived_at,
            fixed_at=stop.arrived_at + timedelta(minutes=3),
        )
        stops.append(stop.model_copy(update={"bottles": [bottle]}))
    b.save_trip(trip.model_copy(update={"stops": stops}), "bottles")
    sync.push(b, dav.url, session=dav_session("tablet-B"))
    sync.pull(a, dav.url, session=dav_session("tablet-A"))
    del a, b  # the children own the stores now

    ack = tmp_path / "acknowledged.jsonl"
    env = cli_env()
    py = [sys.executable, "-m", "tests.sync.workers"]
    lab = subprocess.Popen(
        py + ["lab", str(tmp_path / "tablet-b"), t.id, str(ack), str(LAB_ROUNDS)],
        cwd=ROOT,
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    syncer = subprocess.Popen(
        py + ["sync", str(tmp_path / "tablet-b"), str(tmp_path / "tablet-a"), dav.url, t.id, str(SYNC_ROUNDS)],
        cwd=ROOT,
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    try:
        _, lab_err = lab.communicate(timeout=240)
        sync_out, sync_err = syncer.communicate(timeout=240)
    finally:
        for p in (lab, syncer):
            if p.poll() is None:
                p.kill()
    assert lab.returncode == 0, lab_err
    assert syncer.returncode == 0, sync_err
    rounds = [json.loads(line) for line in sync_out.splitlines()]
    assert len(rounds) == SYNC_ROUNDS and all(r["failed"] == 0 for r in rounds)
    assert sum(r["pulled"] + r["merged"] for r in rounds) >= 1  # the loops really met

    acknowledged = {json.loads(line)["result"] for line in ack.read_text().splitlines()}
    assert len(acknowledged) == LAB_ROUNDS
    b = DeviceStore.open(tmp_path / "tablet-b", "tablet-B")
    a = DeviceStore.open(tmp_path / "tablet-a", "tablet-A")
    assert sync.push(b, dav.url, session=dav_session("tablet-B")).failed == 0
    doc = b.trip_document(t.id)
    lost_in_store = acknowledged - result_ids(doc)
    assert not lost_in_store
    # at the hub: the device's revision is there, byte for byte, and tablet A gets every result
    data = canonical_json_bytes(doc)
    import hashlib

    name = revision_name(doc["revision"], "sha256:" + hashlib.sha256(data).hexdigest())
    files = {f.name: f for f in hub_files(dav.root / "hub")[t.id]}
    assert name in files and files[name].read_bytes() == data
    sync.pull(a, dav.url, session=dav_session("tablet-A"))
    assert not acknowledged - result_ids(a.trip_document(t.id))
    # the other tablet's last note arrived too
    assert doc["stops"][-1]["notes"] == f"gauge read {SYNC_ROUNDS - 1}"
