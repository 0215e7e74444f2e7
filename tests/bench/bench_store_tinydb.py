"""What writing trip files through TinyDB's own API costs, against writing its file layout by hand.

The store writes each trip file with ``Table.update``/``insert`` on its atomic storage (handing
TinyDB the table it has just read under the lock). The reference, measured in the same run, is the
same save with the layout ``{"trip": {"1": doc}}`` written by hand. Both interleaved, on disk and in
a RAM-backed folder (the store's own work without disk latency); medians and ratios.
"""

from __future__ import annotations

import random
import statistics
import sys
import tempfile
import time
from pathlib import Path

from core.store import DeviceStore
from core.store.atomic import atomic_write_bytes
from core.store.trips import TripFiles
from tests.bench.bench_store import STOPS_PER_TRIP, _device, _q

SAVES = 150


def _by_hand(self: TripFiles, doc: dict, doc_bytes: bytes, *, exists: bool) -> bytes:
    file_bytes = b'{"trip":{"1":' + doc_bytes[:-1] + b"}}\n"
    atomic_write_bytes(self.path(doc["id"]), file_bytes)
    self._cache[doc["id"]] = (file_bytes, doc_bytes, doc, {"trip": {"1": doc}})
    return file_bytes


def _run(store: DeviceStore, trip_id: str, rnd: random.Random) -> dict[str, list[float]]:
    api = TripFiles.write
    out: dict[str, list[float]] = {"TinyDB API": [], "by hand": []}
    stops = store.load_trip(trip_id).stops
    try:
        for i in range(SAVES + 10):
            for name, fn in (("TinyDB API", api), ("by hand", _by_hand))[:: 1 if i % 2 else -1]:
                TripFiles.write = fn  # type: ignore[method-assign]
                edited = stops[i % STOPS_PER_TRIP].model_copy(update={"do": _q(round(rnd.uniform(7, 11), 2), "mg/L")})
                t0 = time.perf_counter()
                store.save_stop(trip_id, edited, "bench")
                if i >= 10:
                    out[name].append((time.perf_counter() - t0) * 1000.0)
    finally:
        TripFiles.write = api  # type: ignore[method-assign]
    return out


def main() -> int:
    rnd = random.Random(11)
    with tempfile.TemporaryDirectory(prefix="streamtab-bench-") as tmp:
        disk, trip_id = _device(Path(tmp) / "disk", 1, rnd)
        on_disk = _run(disk, trip_id, rnd)
    ram = DeviceStore.in_memory("bench-ram")
    ram.save_sites(disk.sites())
    from tests.bench.bench_store import _trip

    in_ram = _run(ram, ram.save_trip(_trip(rnd), "bench trip").id, rnd)
    ram.close()
    print(f"store: save one stop of a {STOPS_PER_TRIP}-stop trip, {SAVES} saves each way, interleaved")
    for where, res in (("disk", on_disk), ("RAM-backed folder", in_ram)):
        a, h = statistics.median(res["TinyDB API"]), statistics.median(res["by hand"])
        print(f"  {where:>17}: TinyDB API median {a:6.2f} ms, layout by hand {h:6.2f} ms, ratio {a / h:.2f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
