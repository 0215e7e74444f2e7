"""Crash safety (SIGKILL at random moments while saving stops) and the inter-process lock."""

from __future__ import annotations

import json
import os
import random
import signal
import subprocess
import sys
import textwrap
import time
from datetime import timedelta

import pytest

from core.records.models import Quantity, Stop
from core.store import DeviceStore, StoreLocked
from tests.conftest import ROOT, cli_env
from tests.records.conftest import T0, make_trip

KILLS = 200


def _quantity(value: float, unit: str) -> Quantity:
    return Quantity(text=f"{value} {unit}", entered_value=value, entered_unit=unit, value=value, unit=unit)


def _child(data_dir, report_path, trip_ids, seed) -> None:
    """Runs in a forked child: saves stops until killed; reports each save that returned."""
    rnd = random.Random(seed)
    store = DeviceStore.open(data_dir, device_id="dev-crash")
    fd = os.open(report_path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o644)
    n = 0
    while True:
        trip_id = rnd.choice(trip_ids)
        stop = Stop(
            site_id="LK-01",
            arrived_at=T0 + timedelta(minutes=n),
            temp=_quantity(round(rnd.uniform(5, 25), 2), "°C"),
            pressure=_quantity(1000.0, "hPa"),
            do=_quantity(round(rnd.uniform(6, 11), 2), "mg/L"),
            notes="x" * rnd.randint(0, 2000),
        )
        store.save_stop(trip_id, stop, "crash-test stop")
        # Only after save_stop returned: record it durably, then go on.
        os.write(fd, f"{trip_id} {stop.id}\n".encode())
        os.fsync(fd)
        n += 1


def _wait_for_lines(path, count: int, deadline_s: float) -> None:
    """Waits until `path` holds at least `count` whole lines, or `deadline_s` passes."""
    end = time.monotonic() + deadline_s
    while time.monotonic() < end:
        if path.exists() and path.read_bytes().count(b"\n") >= count:
            return
        time.sleep(0.002)


@pytest.mark.slow
def test_sigkill_while_saving_never_loses_a_returned_save(tmp_path):
    data_dir = tmp_path / "store"
    report = tmp_path / "returned.txt"
    store = DeviceStore.open(data_dir, device_id="dev-crash")
    rnd = random.Random(20260614)
    # Warm up in the parent (imports, validators) so that each forked child saves at once.
    warm = store.save_trip(make_trip(), "warm-up")
    t0 = time.monotonic()
    for k in range(3):
        store.save_stop(
            warm.id,
            Stop(
                site_id="LK-01",
                arrived_at=T0,
                temp=_quantity(10.0 + k, "°C"),
                pressure=_quantity(1000.0, "hPa"),
                do=_quantity(9.0, "mg/L"),
            ),
            "warm-up",
        )
    # Kill within a window of a few saves, whatever this disk's fsync costs today.
    window_s = min(0.15, max(0.03, 6 * (time.monotonic() - t0) / 3))
    trips: list[str] = []
    saves_seen = 0
    killed_mid_write = 0  # kills that left a temporary file behind: the child was inside a write
    for i in range(KILLS):
        if i % 20 == 0:  # fresh trips now and then keep each file small, as on a device
            trips = [store.save_trip(make_trip(), "crash-test trip").id for _ in range(3)]
        pid = os.fork()
        if pid == 0:  # child
            try:
                _child(data_dir, report, trips, i)
            finally:
                os._exit(0)
        # Let the child get 0-2 saves in (however slow the machine is today), then kill it at a
        # random moment of the next save. Waiting is bounded in time.
        _wait_for_lines(report, saves_seen + rnd.randint(0, 2), deadline_s=10.0)
        time.sleep(rnd.uniform(0.0, window_s))
        os.kill(pid, signal.SIGKILL)
        _, status = os.waitpid(pid, 0)
        assert os.WIFSIGNALED(status) and os.WTERMSIG(status) == signal.SIGKILL, (
            f"child ended before the kill (status {status}); see its error"
        )

        leftovers = [p for sub in ("trips", "index") for p in (data_dir / sub).glob(".*.tmp")]
        killed_mid_write += bool(leftovers)
        # After each kill: the store opens, every returned save is there, nothing is half-written.
        store = DeviceStore.open(data_dir, device_id="dev-crash")
        lines = report.read_text().splitlines() if report.exists() else []
        present: dict[str, set[str]] = {}
        for line in lines:
            parts = line.split()
            if len(parts) != 2:
                continue  # a report line cut by the kill: that save may or may not be there
            trip_id, stop_id = parts
            if trip_id not in present:
                present[trip_id] = {s.id for s in store.load_trip(trip_id).stops}
            assert stop_id in present[trip_id], f"kill {i}: a returned save of {trip_id} is missing"
        saves_seen = len(lines)
        for path in (data_dir / "trips").glob("*.json"):
            json.loads(path.read_bytes())  # whole
        summaries = {s.id: s for s in store.list_trips()}
        for trip_id, summary in summaries.items():
            assert summary.revision == store.trip_document(trip_id)["revision"], f"kill {i}: stale index"
        assert store.quarantined() == []
        assert not list((data_dir / "trips").glob(".*.tmp"))
    assert store.verify() == []
    print(f"{KILLS} kills, {saves_seen} returned saves checked, {killed_mid_write} kills inside a write")
    assert saves_seen > KILLS // 2, "the child hardly ever got a save in: kills came too early"
    assert killed_mid_write >= 5, "too few kills landed inside a write to test anything"


HOLDER = textwrap.dedent("""
    import sys, time
    from core.store import DeviceStore
    store = DeviceStore.open(sys.argv[1])
    with store.locked():
        print("held", flush=True)
        time.sleep(float(sys.argv[2]))
    print("released", flush=True)
""")


def test_second_process_waits_then_gets_a_clear_message(tmp_path):
    data_dir = tmp_path / "store"
    DeviceStore.open(data_dir)
    holder = subprocess.Popen(
        [sys.executable, "-c", HOLDER, str(data_dir), "6"], stdout=subprocess.PIPE, text=True, env=cli_env(), cwd=ROOT
    )
    try:
        assert holder.stdout.readline().strip() == "held"
        impatient = DeviceStore.open.__func__  # noqa: F841 - documents that open itself also locks
        t0 = time.monotonic()
        with pytest.raises(StoreLocked) as info:
            DeviceStore.open(data_dir, lock_timeout_s=0.4)
        waited = time.monotonic() - t0
        assert 0.35 <= waited < 5.0  # it waited briefly, then gave up before the holder let go
        msg = str(info.value)
        assert "busy in another program" in msg and "try again" in msg and "\n" not in msg
        # A patient second writer waits for the first and then saves.
        t0 = time.monotonic()
        patient = DeviceStore.open(data_dir, lock_timeout_s=10)
        trip = patient.save_trip(make_trip(), "after the wait")
        assert trip.revision == 1 and time.monotonic() - t0 > 0.5
        assert holder.stdout.readline().strip() == "released"
    finally:
        holder.kill()
        holder.wait(timeout=10)


def test_cli_reports_busy_store(tmp_path):
    from tests.conftest import run_cli

    data_dir = tmp_path / "store"
    DeviceStore.open(data_dir)
    holder = subprocess.Popen(
        [sys.executable, "-c", HOLDER, str(data_dir), "30"], stdout=subprocess.PIPE, text=True, env=cli_env(), cwd=ROOT
    )
    try:
        assert holder.stdout.readline().strip() == "held"
        r = run_cli("trip", "list", data_dir=data_dir, timeout=60)
        assert r.returncode == 2 and "busy in another program" in r.stderr
    finally:
        holder.kill()
        holder.wait(timeout=10)
