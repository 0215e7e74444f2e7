"""Child processes for the two-process sync test: a lab bench recording Winkler results in a loop,
and a sync loop pulling and pushing the same trip. Run as
``python -m tests.sync.workers lab|sync ...``; every loop is bounded."""

from __future__ import annotations

import json
import os
import sys
import time
from datetime import timedelta


def lab(data_dir: str, trip_id: str, ack_file: str, rounds: int) -> int:
    """Records `rounds` Winkler results (each bottle once, then re-titrations) on the trip and
    appends one line per acknowledged save (the save returned) to `ack_file`."""
    from core.rules.lab import record_winkler
    from core.store import DeviceStore, StaleTrip, StoreLocked

    store = DeviceStore.open(data_dir, "tablet-B", lock_timeout_s=30.0)
    with open(ack_file, "a", encoding="utf-8") as ack:
        for i in range(rounds):
            for attempt in range(200):  # bounded: a sync may write in between
                trip = store.load_trip(trip_id)
                bottles = [b for s in trip.stops for b in s.bottles if b.kind == "do-fixed"]
                bottle = bottles[i % len(bottles)]
                at = trip.stops[0].arrived_at + timedelta(hours=2, minutes=i)
                redo = None if not bottle.lab_results else f"re-titration {i}"
                out = record_winkler(
                    trip,
                    bottle.label,
                    titrant_ml=6.0 + i / 10,
                    titrated_ml=201.0,
                    normality=0.025,
                    analysed_at=at,
                    now=at,
                    analyst="J.M.",
                    redo_reason=redo,
                )
                try:
                    saved = store.save_trip(out.trip, f"lab: Winkler {i} on bottle {bottle.label}")
                except (StaleTrip, StoreLocked):
                    time.sleep(0.01 * (attempt % 5))
                    continue
                ack.write(json.dumps({"result": out.result.id, "revision": saved.revision}) + "\n")
                ack.flush()
                os.fsync(ack.fileno())
                break
            else:
                return 3
            time.sleep(0.005)
    return 0


def sync_loop(data_dir: str, other_dir: str, url: str, trip_id: str, rounds: int) -> int:
    """Each round: the other tablet edits a stop's notes and pushes; this device pulls, then pushes."""
    import sync
    from core.store import DeviceStore
    from tests.sync.conftest import dav_session

    store = DeviceStore.open(data_dir, "tablet-B", lock_timeout_s=30.0)
    other = DeviceStore.open(other_dir, "tablet-A")
    for i in range(rounds):
        trip = other.load_trip(trip_id)
        stops = list(trip.stops)
        stops[-1] = stops[-1].model_copy(update={"notes": f"gauge read {i}"})
        other.save_trip(trip.model_copy(update={"stops": stops}), f"notes {i}")
        sync.push(other, url, session=dav_session("tablet-A"))
        sync.pull(other, url, session=dav_session("tablet-A"))
        pulled = sync.pull(store, url, session=dav_session("tablet-B"))
        pushed = sync.push(store, url, session=dav_session("tablet-B"))
        sys.stdout.write(
            json.dumps(
                {
                    "round": i,
                    "pulled": pulled.pulled,
                    "merged": pulled.merged,
                    "pushed": pushed.pushed,
                    "failed": pulled.failed + pushed.failed,
                }
            )
            + "\n"
        )
        sys.stdout.flush()
    return 0


def main(argv: list[str]) -> int:
    if argv[0] == "lab":
        return lab(argv[1], argv[2], argv[3], int(argv[4]))
    if argv[0] == "sync":
        return sync_loop(argv[1], argv[2], argv[3], argv[4], int(argv[5]))
    raise SystemExit(f"unknown worker {argv[0]!r}")


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
