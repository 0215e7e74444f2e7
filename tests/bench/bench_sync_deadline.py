"""Cost of the per-request deadline (sync.session): a GET to a real wsgidav server on 127.0.0.1 with
the deadline watch, against the same GET with the watch replaced by a no-op, in the same run
(medians of alternating rounds; target: ratio ≤ 1.1)."""

from __future__ import annotations

import statistics
import tempfile
import time
from pathlib import Path

ROUNDS = 7
REQUESTS = 150


class _NoWatch:
    """The reference: what `Session.request` would do without a deadline."""

    fired = False
    done = False

    def __init__(self, deadline_s: float) -> None:
        pass

    def add(self, conn) -> None:  # noqa: ANN001
        pass

    def attach(self, resp) -> None:  # noqa: ANN001
        resp.streamtab_watch = self

    def finish(self) -> None:
        pass


def _per_request_ms(url: str) -> float:
    from tests.sync.conftest import dav_session

    session = dav_session("bench")
    session.request("GET", url).close()  # connection made outside the timing
    t0 = time.perf_counter()
    for _ in range(REQUESTS):
        session.request("GET", url).close()
    elapsed = time.perf_counter() - t0
    session.close()
    return elapsed / REQUESTS * 1000


def main() -> int:
    import sync.session as session_module
    from tests.sync.conftest import start_dav

    server = start_dav(Path(tempfile.mkdtemp(prefix="bench-deadline-")))
    real = session_module._Watch
    url = server.url + "missing.json"
    timed: dict[str, list[float]] = {"deadline": [], "none": []}
    try:
        for _ in range(ROUNDS):
            session_module._Watch = real
            timed["deadline"].append(_per_request_ms(url))
            session_module._Watch = _NoWatch
            timed["none"].append(_per_request_ms(url))
    finally:
        session_module._Watch = real
        server.stop()
    with_watch, without = statistics.median(timed["deadline"]), statistics.median(timed["none"])
    print(
        f"GET with the request deadline: median {with_watch:.3f} ms; without: {without:.3f} ms; "
        f"ratio {with_watch / without:.2f} (target ≤ 1.1)"
    )
    return 0
