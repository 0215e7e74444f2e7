"""Sync benchmark: a push with 500 trips on the hub and one changed (HTTP requests and wall time,
as a ratio to pushing one trip to an empty hub, measured in the same run), and the throughput
of a first push of 500 trips. WebDAV is a real wsgidav server on 127.0.0.1."""

from __future__ import annotations

import os
import statistics
import tempfile
import time
from pathlib import Path

N_TRIPS = int(os.environ.get("STREAMTAB_BENCH_TRIPS", "500"))
REPEATS = 9


def _fill(store, n: int) -> list[str]:
    from tests.sync.conftest import new_trip

    return [new_trip(store, day=1 + i % 28, stops=1).id for i in range(n)]


def _push(store, url: str):
    import sync
    from tests.sync.conftest import dav_session

    session = dav_session(store.device_id)
    t0 = time.perf_counter()
    report = sync.push(store, url, session=session)
    elapsed = time.perf_counter() - t0
    session.close()
    return report, session.request_count, elapsed


def main() -> int:
    from tests.sync.conftest import edit_stop_notes, open_store, start_dav

    with tempfile.TemporaryDirectory(prefix="streamtab-bench-sync-") as tmp:
        tmp = Path(tmp)
        server = start_dav(tmp / "dav")
        try:
            big = open_store(tmp / "device-500", "bench-tablet")
            t0 = time.perf_counter()
            ids = _fill(big, N_TRIPS)
            print(f"setup: {N_TRIPS} trips saved in {time.perf_counter() - t0:.1f} s")

            # throughput of a first push of N trips
            report, requests_first, elapsed_first = _push(big, server.url)
            assert report.pushed == N_TRIPS, report.to_dict()
            print(
                f"first push of {N_TRIPS} trips: {elapsed_first:.2f} s, "
                f"{N_TRIPS / elapsed_first:.1f} trips/s, {requests_first} requests "
                f"({requests_first / N_TRIPS:.2f} per trip)"
            )

            # one trip changed with N on the hub, and one trip to an empty hub (a fresh hub
            # collection and device each time), interleaved so that load on the machine falls on both
            changed_times, changed_requests = [], []
            single_times, single_requests = [], []
            for i in range(REPEATS):
                edit_stop_notes(big, ids[i * 7 % len(ids)], 0, f"bench edit {i}")
                report, n_req, elapsed = _push(big, server.url)
                assert report.pushed == 1 and report.unchanged == N_TRIPS - 1, report.to_dict()
                changed_times.append(elapsed)
                changed_requests.append(n_req)

                small = open_store(tmp / f"device-1-{i}", f"bench-single-{i}")
                _fill(small, 1)
                (server.root / f"empty-{i}").mkdir()
                url = server.url.replace("/hub/", f"/empty-{i}/")
                report, n_req, elapsed = _push(small, url)
                assert report.pushed == 1, report.to_dict()
                single_times.append(elapsed)
                single_requests.append(n_req)
        finally:
            server.stop()

    med_changed = statistics.median(changed_times)
    med_single = statistics.median(single_times)
    worst = max(changed_requests)
    print(
        f"push, {N_TRIPS} on the hub, 1 changed: median {med_changed * 1000:.1f} ms, "
        f"requests {statistics.median(changed_requests):g} (max {worst}; target ≤ 3: "
        + ("met)" if worst <= 3 else "NOT met — PROPFIND, PUT, MOVE and the change log entry's PUT; sync/DESIGN.md)")
    )
    print(
        f"push, 1 trip to an empty hub:        median {med_single * 1000:.1f} ms, "
        f"requests {statistics.median(single_requests):g}"
    )
    print(f"ratio (changed-of-{N_TRIPS} / one-to-empty): {med_changed / med_single:.2f} (target ≤ 1.5)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
