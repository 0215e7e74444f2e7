"""The outbox: what this device has sent to (and seen at) each hub, one small file per trip.

``<data dir>/sync/<hub key>/hub.json`` names the hub; ``<data dir>/sync/<hub key>/trips/<trip
uuid>.json`` holds, for one trip: the last pushed revision, its content hash, the hub file name
and ETag, the year folder, the hub revision files already contained in the device copy
(``seen``), files found bad (``bad``), and the last document both sides agreed on (``base``, the
ancestor for the next three-way merge). Every write goes through core.atomic.atomic_write_bytes,
so a crash leaves the old entry or the new one. Losing the outbox loses nothing: the next push
lists the hub and finds its revisions by name.
"""
from __future__ import annotations

import json
from dataclasses import asdict, dataclass, field
from pathlib import Path

from core.atomic import atomic_write_bytes
from sync.layout import canonical_trip_id

__all__ = ["OutboxEntry", "Outbox", "hubs"]


@dataclass
class OutboxEntry:
    trip_id: str
    year: str
    pushed_revision: int | None = None
    pushed_hash: str | None = None
    hub_name: str | None = None
    etag: str | None = None
    pushed_at: str | None = None
    seen: list[str] = field(default_factory=list)
    bad: list[str] = field(default_factory=list)
    base: dict | None = None

    def seen_set(self) -> frozenset[str]:
        return frozenset(self.seen) | frozenset(self.bad)


class Outbox:
    def __init__(self, data_dir: Path | str, hub_key: str, hub_url: str) -> None:
        self.folder = Path(data_dir) / "sync" / hub_key
        self.hub_url = hub_url
        self._cache: dict[str, OutboxEntry] | None = None

    def _path(self, trip_id: str) -> Path:
        return self.folder / "trips" / f"{canonical_trip_id(trip_id)}.json"

    def _ensure_hub_file(self) -> None:
        hub = self.folder / "hub.json"
        if not hub.exists():
            atomic_write_bytes(hub, json.dumps({"url": self.hub_url}).encode("utf-8"))

    @staticmethod
    def _load(path: Path) -> OutboxEntry | None:
        try:
            raw = json.loads(path.read_text(encoding="utf-8"))
            return OutboxEntry(**{k: raw.get(k) for k in OutboxEntry.__dataclass_fields__
                                  if k in raw} | {"trip_id": raw["trip_id"], "year": raw["year"]})
        except (OSError, ValueError, KeyError, TypeError):
            return None     # unreadable: act as if never pushed (the hub listing settles it)

    def all(self) -> dict[str, OutboxEntry]:
        if self._cache is None:
            self._cache = {}
            folder = self.folder / "trips"
            if folder.is_dir():
                for p in folder.glob("*.json"):
                    e = self._load(p)
                    if e is not None:
                        self._cache[e.trip_id] = e
        return self._cache

    def get(self, trip_id: str) -> OutboxEntry | None:
        return self.all().get(trip_id)

    def put(self, entry: OutboxEntry) -> None:
        self._ensure_hub_file()
        entry.seen = sorted(set(entry.seen))
        entry.bad = sorted(set(entry.bad))
        atomic_write_bytes(self._path(entry.trip_id),
                           json.dumps(asdict(entry), sort_keys=True, ensure_ascii=False).encode("utf-8"))
        self.all()[entry.trip_id] = entry


def hubs(data_dir: Path | str) -> list[Outbox]:
    """Every hub this device has an outbox for."""
    out = []
    root = Path(data_dir) / "sync"
    if root.is_dir():
        for hub in sorted(root.glob("*/hub.json")):
            try:
                url = json.loads(hub.read_text(encoding="utf-8"))["url"]
            except (OSError, ValueError, KeyError):
                url = hub.parent.name
            out.append(Outbox(data_dir, hub.parent.name, url))
    return out
