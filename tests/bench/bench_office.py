"""Office benchmarks, on one store of 10,000 invented trips of 10 stops:

* pull with 10,000 trips on the hub and one changed, from a real wsgidav server that refuses
  ``PROPFIND Depth: infinity`` (403, RFC 4918 §9.1): HTTP requests (target ≤ 5) and wall time as a
  ratio to pulling one changed trip from a hub holding only that trip (target ≤ 1.5);
* the PostgreSQL archive (a real server, tests/pgserver.py): first load of 10,000 trips (trips/s);
  an incremental load with one trip changed, as a ratio to loading one trip into an empty archive
  (target ≤ 1.5); the season summary query on 10,000 trips (target ≤ 100 ms).

Every ratio is measured in one run: each round times both sides back to back, in alternating
order, after an uncounted warm-up round; the figure is the median of the per-round ratios (the
ratio of the medians is printed beside it). Stores and the hub live in
/dev/shm when it is there (the setup saves 10,000 trips; on a disk that alone takes many minutes).
``STREAMTAB_BENCH_HUB_TRIPS`` changes the number of trips (default 10,000).
"""

from __future__ import annotations

import gc
import os
import shutil
import statistics
import tempfile
import time
from datetime import datetime, timedelta, timezone
from pathlib import Path

N_TRIPS = int(os.environ.get("STREAMTAB_BENCH_HUB_TRIPS", "10000"))
STOPS = 10
#: Timed rounds per ratio; the two sides of a round run back to back, in alternating order.
PULL_REPEATS = int(os.environ.get("STREAMTAB_BENCH_REPEATS", "15"))
ARCHIVE_REPEATS = int(os.environ.get("STREAMTAB_BENCH_REPEATS", "25"))
SITES = [
    ("LK-01", "Mill Ford", 212.0, "warm"),
    ("LK-02", "Heron Bend", 248.0, "warm"),
    ("LK-03", "Alder Gauge", 395.0, "cold"),
    ("LK-04", "Culvert Lane", 186.0, "warm"),
    ("LK-05", "Tamsin Falls Pool", 520.0, "cold"),
]


def _scratch() -> str:
    shm = Path("/dev/shm")
    return tempfile.mkdtemp(
        prefix="streamtab-bench-office-", dir=str(shm) if shm.is_dir() and os.access(shm, os.W_OK) else None
    )


def _trip(n: int):
    from core.records.models import Stop, Trip, measure

    start = datetime(2024 + n % 3, 5 + n % 5, 1 + n % 28, 8, 0, tzinfo=timezone.utc)
    stops = [
        Stop(
            site_id=SITES[k % len(SITES)][0],
            arrived_at=start + timedelta(minutes=30 * (k + 1)),
            temp=measure("temp", f"{10 + (n + k) % 12}.5 C"),
            pressure=measure("pressure", "990 hPa"),
            conductivity=measure("conductivity", f"{200 + (n + k) % 90} uS/cm"),
            do=measure("do", f"{4 + (n * 7 + k) % 60 / 10:.1f} mg/L"),
        )
        for k in range(STOPS)
    ]
    return Trip(
        program="Tamsin Valley Stream Watch (bench)",
        crew=["R.O.", "J.V."],
        started_at=start,
        ended_at=start + timedelta(hours=7),
        stops=stops,
    )


def _store(path: Path, device: str, n: int):
    from core.records.models import Site
    from core.store import DeviceStore

    store = DeviceStore.open(path, device)
    store.save_sites([Site(id=i, name=name, elevation_m=e, water_class=c) for i, name, e, c in SITES])
    ids = [store.save_trip(_trip(k), "bench trip").id for k in range(n)]
    return store, ids


def _edit(store, trip_id: str, note: str) -> None:
    def apply(trip):
        stops = list(trip.stops)
        stops[0] = stops[0].model_copy(update={"notes": note})
        return trip.model_copy(update={"stops": stops})

    store.update_trip(trip_id, "bench edit", apply)


def _pull(store, url: str):
    import sync
    from tests.sync.conftest import dav_session

    session = dav_session(store.device_id)
    t0 = time.perf_counter()
    report = sync.pull(store, url, session=session)
    elapsed = time.perf_counter() - t0
    session.close()
    return report, session.request_count, elapsed


def _ms(xs: list[float]) -> float:
    return statistics.median(xs) * 1000


def _timed(fn):  # noqa: ANN001, ANN202
    """`fn()` and its wall time; the cyclic collector runs before, outside the timing, so neither
    side of a ratio pays for the other's garbage."""
    gc.collect()
    t0 = time.perf_counter()
    out = fn()
    return out, time.perf_counter() - t0


def _ratio_lines(what: str, measured: list[float], reference: list[float], target: float) -> list[str]:
    """The figures of one ratio: medians of both sides, the median of the per-round ratios (the
    two sides of a round ran back to back, in alternating order) and the ratio of the medians."""
    per_round = statistics.median(m / r for m, r in zip(measured, reference, strict=True))
    of_medians = statistics.median(measured) / statistics.median(reference)
    verdict = "met" if per_round <= target else "NOT met"
    return [
        f"ratio ({what}): median of {len(measured)} per-round ratios {per_round:.2f}, "
        f"ratio of medians {of_medians:.2f} (target ≤ {target:g}: {verdict})"
    ]


def bench_pull(tmp: Path, crew, ids: list[str]) -> None:
    import sync
    from core.store import DeviceStore
    from tests.sync.conftest import finite_depth_only, start_dav

    server = start_dav(tmp / "dav", wrap=finite_depth_only)
    try:
        hub = server.root / "hub"
        t0 = time.perf_counter()
        assert sync.push(crew, str(hub)).pushed == len(ids)  # through the folder wsgidav serves
        print(f"setup: {len(ids)} trips put on the hub (folder push) in {time.perf_counter() - t0:.1f} s")
        office_dir = tmp / "office"
        shutil.copytree(crew.data_dir, office_dir, ignore=shutil.ignore_patterns("sync"))
        office = DeviceStore.open(office_dir, "office-desk")
        report, n_req, elapsed = _pull(office, server.url)
        assert report.failed == 0 and report.listed == "walk", report.to_dict()
        print(f"first pull of {len(ids)} trips (walk, Depth: infinity refused): {n_req} requests, {elapsed:.1f} s")

        def big_ready(i: int, tid: str):  # noqa: ANN202
            _edit(crew, tid, f"bench edit {i}")
            assert sync.push(crew, str(hub)).pushed == 1

            def check(report) -> None:  # noqa: ANN001
                assert report.listed == "log" and [t.trip_id for t in report.per_trip] == [tid], str(report)[:300]

            return office, server.url, check

        def one_ready(i: int, tid: str):  # noqa: ANN202
            # the reference: a hub holding only that trip, one change, pulled the same way
            small_hub = server.root / f"one-{i}"
            small_hub.mkdir()
            solo = DeviceStore.open(tmp / f"solo-{i}", f"bench-solo-{i}")
            solo.put_document(crew.trip_document(tid), "bench copy", expected_revision=None)
            sync.push(solo, str(small_hub))
            desk = DeviceStore.open(tmp / f"desk-{i}", f"office-solo-{i}")
            url = server.url.replace("/hub/", f"/one-{i}/")
            _pull(desk, url)
            _edit(solo, tid, f"bench edit {i} (solo)")
            sync.push(solo, str(small_hub))

            def check(report) -> None:  # noqa: ANN001
                assert report.listed == "log" and len(report.per_trip) == 1, str(report)[:300]

            return desk, url, check

        def timed_pull(ready) -> tuple[float, int]:  # noqa: ANN001
            store, url, check = ready
            gc.collect()  # outside the timing (see _timed)
            report, n_req, elapsed = _pull(store, url)
            check(report)
            return elapsed, n_req

        big_t, big_n, one_t, one_n = [], [], [], []
        for i in range(-1, PULL_REPEATS):  # round -1 warms both paths up and is not counted
            tid = ids[(i * 7919) % len(ids)]
            # both sides made ready first (the 10,000-trip side's push walks its store), then
            # both pulls timed back to back, in alternating order
            big_side, one_side = big_ready(i, tid), one_ready(i, tid)
            if i % 2 == 0:
                big, one = timed_pull(big_side), timed_pull(one_side)
            else:
                one = timed_pull(one_side)
                big = timed_pull(big_side)
            if i >= 0:
                big_t.append(big[0])
                big_n.append(big[1])
                one_t.append(one[0])
                one_n.append(one[1])
    finally:
        server.stop()
    print(
        f"pull, {len(ids)} trips on the hub, 1 changed: median {_ms(big_t):.1f} ms, requests "
        f"{statistics.median(big_n):g} (max {max(big_n)}; target ≤ 5: {'met' if max(big_n) <= 5 else 'NOT met'})"
    )
    print(
        f"pull, hub holding that 1 trip, 1 changed:   median {_ms(one_t):.1f} ms, requests {statistics.median(one_n):g}"
    )
    print(*_ratio_lines("pull", big_t, one_t, 1.5), sep="\n")


def bench_archive(tmp: Path, crew, ids: list[str]) -> None:
    import psycopg

    import sync.archive as archive
    from core.store import DeviceStore
    from tests.pgserver import PgServer

    with PgServer(durable=True) as pg:
        pg.wait_ready()
        db = pg.create_database("bench")
        t0 = time.perf_counter()
        report = archive.load(crew, db)
        first = time.perf_counter() - t0
        assert report.loaded == len(ids), report.to_dict()
        print(f"archive first load: {len(ids)} trips of {STOPS} stops in {first:.1f} s, {len(ids) / first:.0f} trips/s")

        # the reference archives are made before the timed rounds: CREATE DATABASE copies the
        # template through the WAL (megabytes), which would otherwise land between the two sides
        empties = []
        for i in range(-1, ARCHIVE_REPEATS):
            empty = pg.create_database(f"one_{i + 1}")
            with psycopg.connect(empty) as conn:
                archive.migrate(conn)  # an empty archive: its schema, no trips
            empties.append(empty)
        # and a checkpoint now, so the one the bulk load started does not spread its writes over
        # the timed rounds; every incremental load still writes full-page images of the pages
        # it is the first to touch since then (as a load in production does)
        with psycopg.connect(pg.conninfo(), autocommit=True) as conn:
            conn.execute("CHECKPOINT")

        def inc_round(i: int, tid: str) -> float:
            _edit(crew, tid, f"archive edit {i}")
            fresh = DeviceStore.open(crew.data_dir, crew.device_id)  # as the command line opens it
            report, elapsed = _timed(lambda: archive.load(fresh, db))
            assert report.loaded_ids == [tid], report.to_dict()
            return elapsed

        def one_round(i: int, tid: str) -> float:
            solo = DeviceStore.open(tmp / f"archive-solo-{i}", f"bench-archive-solo-{i}")
            solo.put_document(crew.trip_document(tid), "bench copy", expected_revision=None)
            solo = DeviceStore.open(solo.data_dir, solo.device_id)
            report, elapsed = _timed(lambda: archive.load(solo, empties[i + 1]))
            assert report.loaded == 1
            return elapsed

        inc_t, one_t = [], []
        for i in range(-1, ARCHIVE_REPEATS):  # round -1 warms both paths up and is not counted
            tid = ids[(i * 104729) % len(ids)]
            if i % 2 == 0:
                inc, one = inc_round(i, tid), one_round(i, tid)
            else:
                one = one_round(i, tid)
                inc = inc_round(i, tid)
            if i >= 0:
                inc_t.append(inc)
                one_t.append(one)
        print(f"archive incremental load, 1 of {len(ids)} changed: median {_ms(inc_t):.1f} ms")
        print(f"archive load of 1 trip into an empty archive:   median {_ms(one_t):.1f} ms")
        print(*_ratio_lines("archive", inc_t, one_t, 1.5), sep="\n")

        q_all, q_season = [], []
        with psycopg.connect(db) as conn:
            for _ in range(ARCHIVE_REPEATS):
                rows, elapsed = _timed(lambda: archive.season_summary(None, conn=conn))
                q_all.append(elapsed)
                _, elapsed = _timed(lambda: archive.season_summary(None, season=2025, conn=conn))
                q_season.append(elapsed)
        assert sum(r["visits"] for r in rows) == len(ids) * STOPS
        verdict = "met" if max(_ms(q_all), _ms(q_season)) <= 100 else "NOT met"
        print(
            f"season summary, every season and site ({len(ids) * STOPS} visits): median {_ms(q_all):.1f} ms; "
            f"one season: median {_ms(q_season):.1f} ms (target ≤ 100 ms: {verdict})"
        )


def main() -> int:
    tmp = Path(_scratch())
    try:
        t0 = time.perf_counter()
        crew, ids = _store(tmp / "crew", "bench-crew", N_TRIPS)
        print(f"setup: {N_TRIPS} trips of {STOPS} stops saved in {time.perf_counter() - t0:.1f} s")
        # the setup's objects (10,000 trips held by this harness) are not the measured code's:
        # keep the cyclic collector from walking them inside the timed calls
        gc.collect()
        gc.freeze()
        bench_archive(tmp, crew, ids)
        bench_pull(tmp, crew, ids)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
