"""The outbox: what this device has sent to (and seen at) each hub, one small file per trip.

``<data dir>/sync/<hub key>/hub.json`` names the hub; ``<data dir>/sync/<hub key>/trips/<trip
uuid>.json`` holds, for one trip: the last pushed revision, its content hash, the hub file name
and ETag, the year folder, the hub revision files already contained in the device copy
(``seen``), files found bad (``bad``), and the last hub document the device copy contains
(``base``, the ancestor for the next three-way merge). Every write goes through
core.store.atomic.atomic_write_bytes, so a crash leaves the old entry or the new one.

``manifest.json`` beside them is a cache of every entry without its base document, and
``journal.jsonl`` the entries changed since (one line per write, folded into the manifest every
few hundred lines), so that deciding what to send reads two files, not one per trip, and a push
of one trip does not rewrite a record of all of them. The cache can only lag behind the per-trip
files (a crash before a line reached the disk): then a trip is re-checked at the hub, never
skipped wrongly, since a name once seen at the hub stays there.
Losing the whole outbox loses nothing: the next push lists the hub and finds revisions by name.
"""

from __future__ import annotations

import json
import os
from dataclasses import asdict, dataclass, field
from pathlib import Path

from core.store.atomic import atomic_write_bytes
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
        """Hub files already contained in the device copy. Files found bad (`bad`) are not in
        it: they are read and checked again at every sync, never blacklisted."""
        return frozenset(self.seen)


def _entry(raw: dict) -> OutboxEntry:
    return OutboxEntry(**{k: raw[k] for k in OutboxEntry.__dataclass_fields__ if k in raw})


class Outbox:
    def __init__(self, data_dir: Path | str, hub_key: str, hub_url: str) -> None:
        self.folder = Path(data_dir) / "sync" / hub_key
        self.hub_url = hub_url
        self._summary: dict[str, OutboxEntry] | None = None
        self._journal_lines = 0
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
            return None  # unreadable: act as if never pushed (the hub listing settles it)

    def all(self) -> dict[str, OutboxEntry]:
        """Every entry (without base documents), from the manifest when it is readable."""
        if self._summary is None:
            self._summary = {}
            try:
                raw = json.loads((self.folder / "manifest.json").read_text(encoding="utf-8"))
                for item in raw["entries"]:
                    e = _entry(item)
                    self._summary[e.trip_id] = e
                self._replay_journal()
                return self._summary
            except (OSError, ValueError, KeyError, TypeError):
                self._summary = {}
            self._dirty = True  # no usable manifest: rebuild it at the end of this run
            folder = self.folder / "trips"
            if folder.is_dir():
                for p in folder.glob("*.json"):
                    loaded = self._load(p)
                    if loaded is not None:
                        loaded.base = None
                        self._summary[loaded.trip_id] = loaded
        return self._summary

    def _replay_journal(self) -> None:
        assert self._summary is not None, "all() sets the summary before replaying the journal"
        self._journal_lines = 0
        try:
            lines = (self.folder / "journal.jsonl").read_bytes().splitlines()
        except FileNotFoundError:
            return
        for line in lines:
            self._journal_lines += 1
            try:
                e = _entry(json.loads(line))
            except (ValueError, TypeError):
                continue  # a line torn by a crash: that trip is re-checked at the hub
            if e.trip_id and e.year:
                self._summary[e.trip_id] = e

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
        atomic_write_bytes(
            self._path(entry.trip_id), json.dumps(asdict(entry), sort_keys=True, ensure_ascii=False).encode("utf-8")
        )
        self._full[entry.trip_id] = entry
        light = OutboxEntry(**{k: getattr(entry, k) for k in OutboxEntry.__dataclass_fields__ if k != "base"})
        if self._summary is not None:
            self._summary[entry.trip_id] = light
        # (not read in this run, e.g. a pull from the change log that touched one trip: the journal
        # line is enough, and the manifest of every trip is not read for one change)
        if not self._dirty:  # the manifest is current: record this change in the journal
            keys = [k for k in OutboxEntry.__dataclass_fields__ if k != "base"]
            with open(self.folder / "journal.jsonl", "ab") as fh:
                fh.write(
                    json.dumps({k: getattr(light, k) for k in keys}, sort_keys=True, ensure_ascii=False).encode("utf-8")
                    + b"\n"
                )
            self._journal_lines += 1

    def flush(self) -> None:
        """Folds the journal into the manifest when the manifest was missing or the journal long."""
        if self._summary is None or not (self._dirty or self._journal_lines > 256):
            return
        self._ensure_hub_file()
        keys = [k for k in OutboxEntry.__dataclass_fields__ if k != "base"]
        entries = [{k: getattr(e, k) for k in keys} for _, e in sorted(self._summary.items())]
        # a cache: replaced atomically (never seen half-written) but not fsynced; after a power
        # cut it may be the older one, which only costs a re-check at the hub
        atomic_write_bytes(
            self.folder / "manifest.json",
            json.dumps({"entries": entries}, sort_keys=True, ensure_ascii=False).encode("utf-8"),
            durable=False,
        )
        try:
            os.unlink(self.folder / "journal.jsonl")
        except FileNotFoundError:
            pass
        self._journal_lines = 0
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
