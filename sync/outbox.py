"""The outbox: what this device has sent to (and seen at) each hub, one small file per trip.

``<data dir>/sync/<hub key>/hub.json`` names the hub; ``<data dir>/sync/<hub key>/trips/<trip
uuid>.json`` holds, for one trip: the last pushed revision, its content hash, the hub file name
and ETag, the year folder, the hub revision files already contained in the device copy
(``seen``), files found bad (``bad``), and the last hub document the device copy contains
(``base``, the ancestor for the next three-way merge). Every write goes through
core.atomic.atomic_write_bytes, so a crash leaves the old entry or the new one.

``manifest.json`` beside them is a cache of every entry without its base document, rewritten
once at the end of a sync run, so that deciding what to send reads one file, not one per trip.
It can only lag behind the per-trip files (a crash before it was written): then a trip is
re-checked at the hub, never skipped wrongly, since a name once seen at the hub stays there.
Losing the whole outbox loses nothing: the next push lists the hub and finds revisions by name.
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


def _entry(raw: dict) -> OutboxEntry:
    return OutboxEntry(**{k: raw[k] for k in OutboxEntry.__dataclass_fields__ if k in raw})


class Outbox:
    def __init__(self, data_dir: Path | str, hub_key: str, hub_url: str) -> None:
        self.folder = Path(data_dir) / "sync" / hub_key
        self.hub_url = hub_url
        self._summary: dict[str, OutboxEntry] | None = None
        self._full: dict[str, OutboxEntry] = {}
        self._dirty = False

    def _path(self, trip_id: str) -> Path:
        return self.folder / "trips" / f"{canonical_trip_id(trip_id)}.json"

    def _ensure_hub_file(self) -> None:
        hub = self.folder / "hub.json"
        if not hub.exists():
            atomic_write_bytes(hub, json.dumps({"url": self.hub_url}).encode("utf-8"))

    def _load(self, path: Path) -> OutboxEntry | None:
        try:
            raw = json.loads(path.read_text(encoding="utf-8"))
            if not isinstance(raw, dict) or not raw.get("trip_id") or not raw.get("year"):
                return None
            return _entry(raw)
        except (OSError, ValueError, KeyError, TypeError):
            return None     # unreadable: act as if never pushed (the hub listing settles it)

    def all(self) -> dict[str, OutboxEntry]:
        """Every entry (without base documents), from the manifest when it is readable."""
        if self._summary is None:
            self._summary = {}
            try:
                raw = json.loads((self.folder / "manifest.json").read_text(encoding="utf-8"))
                for item in raw["entries"]:
                    e = _entry(item)
                    self._summary[e.trip_id] = e
                return self._summary
            except (OSError, ValueError, KeyError, TypeError):
                self._summary = {}
            folder = self.folder / "trips"
            if folder.is_dir():
                for p in folder.glob("*.json"):
                    e = self._load(p)
                    if e is not None:
                        e.base = None
                        self._summary[e.trip_id] = e
                self._dirty = True
        return self._summary

    def get(self, trip_id: str) -> OutboxEntry | None:
        """The full entry of one trip (with its base document), from its own file."""
        if trip_id not in self._full:
            e = self._load(self._path(trip_id)) if self._path(trip_id).exists() else None
            if e is None:
                return None
            self._full[trip_id] = e
        return self._full[trip_id]

    def put(self, entry: OutboxEntry) -> None:
        self._ensure_hub_file()
        entry.seen = sorted(set(entry.seen))
        entry.bad = sorted(set(entry.bad))
        atomic_write_bytes(self._path(entry.trip_id),
                           json.dumps(asdict(entry), sort_keys=True, ensure_ascii=False).encode("utf-8"))
        self._full[entry.trip_id] = entry
        light = OutboxEntry(**{k: getattr(entry, k) for k in OutboxEntry.__dataclass_fields__ if k != "base"})
        self.all()[entry.trip_id] = light
        self._dirty = True

    def flush(self) -> None:
        """Rewrites the manifest if anything changed in this run."""
        if not self._dirty or self._summary is None:
            return
        self._ensure_hub_file()
        keys = [k for k in OutboxEntry.__dataclass_fields__ if k != "base"]
        entries = [{k: getattr(e, k) for k in keys} for _, e in sorted(self._summary.items())]
        atomic_write_bytes(self.folder / "manifest.json",
                           json.dumps({"entries": entries}, sort_keys=True,
                                      ensure_ascii=False).encode("utf-8"))
        self._dirty = False


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
