"""The hub's change log: what each push added, so a pull need not list every trip at the hub.

Layout (beside ``trips/``; see `sync.layout`)::

    <hub>/log/<device key>/e<seq:08>-<sha256 first 24 hex>.json     immutable, one per push

An entry is the canonical JSON ``{"format": 1, "device": <device key>, "seq": n, "files":
["<year>/<trip uuid>/<revision file>", ...]}``; its name carries its sequence number (per device,
1, 2, 3 ...) and its content hash, and is written like a revision (upload, then MOVE without
overwrite). A device writes only in its own folder, so two devices never write the same name.
A push writes its revision files first and its entry last: an entry only names files that exist.

A pull lists ``log/`` (one request), lists only the device folders changed since it last looked
(a folder's modification time, compared in the server's own clock), reads the entries it has not
seen and then the revision files they name. Anything odd — no state yet, no ``log/`` at the hub,
an entry that does not match its name or cannot be read, a hole in a device's sequence, or more
than `REWALK_AFTER_S` since the last full listing — makes that pull walk the whole hub instead,
as before the log existed. So a lost or damaged entry costs one walk, never a trip.

The device's own record (what it has seen, its next number, files not yet logged) is
``<data dir>/sync/<hub key>/changelog.json``, written atomically; losing it costs one walk.
"""

from __future__ import annotations

import hashlib
import json
import logging
import re
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from core.store.atomic import atomic_write_bytes, canonical_json_bytes
from sync import errors
from sync.layout import HASH_HEX, LOG, canonical_trip_id, parse_revision_name

__all__ = [
    "LOG",
    "entry_name",
    "entry_bytes",
    "parse_entry",
    "LogState",
    "Changes",
    "read_changes",
    "snapshot",
    "append",
    "REWALK_AFTER_S",
    "FOLDER_SETTLE_S",
    "needs_listing",
]

log = logging.getLogger("streamtab.sync")

FORMAT = 1
#: A full listing at least this often (s) also finds revisions whose entry never got written.
REWALK_AFTER_S = 24 * 3600
#: A folder listed less than this long (s, server clock) after its last change is listed again
#: next time: HTTP dates have one-second steps, so a later entry may carry the same date.
FOLDER_SETTLE_S = 2.0
#: At most this many entries read per device per pull before a walk is cheaper.
MAX_ENTRIES_PER_PULL = 2000
_NAME_RE = re.compile(rf"^e(\d{{8,}})-([0-9a-f]{{{HASH_HEX}}})\.json$")
_DEVICE_RE = re.compile(r"^[0-9a-f]{12}$")


def entry_bytes(device: str, seq: int, files: list[str]) -> bytes:
    return canonical_json_bytes({"format": FORMAT, "device": device, "seq": seq, "files": sorted(set(files))})


def entry_name(seq: int, data: bytes) -> str:
    return f"e{seq:08d}-{hashlib.sha256(data).hexdigest()[:HASH_HEX]}.json"


def parse_name(name: str) -> int | None:
    m = _NAME_RE.match(name)
    return int(m.group(1)) if m else None


def _check_file(path: str) -> tuple[str, str, str]:
    parts = path.split("/")
    if len(parts) != 3 or not (re.fullmatch(r"\d{4}|undated", parts[0]) and parse_revision_name(parts[2])):
        raise ValueError(path)
    return parts[0], canonical_trip_id(parts[1]), parts[2]


def parse_entry(device: str, name: str, data: bytes) -> list[tuple[str, str, str]]:
    """(year, trip id, revision file) of every file an entry names; ValueError when the entry does
    not match its name or its folder."""
    seq = parse_name(name)
    if seq is None or entry_name(seq, data) != name:
        raise ValueError(f"log entry {device}/{name} does not match the hash in its name")
    doc = json.loads(data.decode("utf-8"))
    if not isinstance(doc, dict) or doc.get("device") != device or doc.get("seq") != seq:
        raise ValueError(f"log entry {device}/{name} names another device or number")
    files = doc.get("files")
    if not isinstance(files, list) or not all(isinstance(f, str) for f in files):
        raise ValueError(f"log entry {device}/{name} has no file list")
    return [_check_file(f) for f in files]


# --- the device's own record ---------------------------------------------------------------------
@dataclass
class DeviceSeen:
    seen: list[str] = field(default_factory=list)
    stamp: float | None = None  # the folder's modification time when last listed
    listed_at: float | None = None  # when it was listed (server clock)


@dataclass
class LogState:
    path: Path
    own_seq: int | None = None
    pending: list[str] = field(default_factory=list)
    devices: dict[str, DeviceSeen] = field(default_factory=dict)
    walked_at: float | None = None  # time.time() of the last full listing on this device

    @classmethod
    def load(cls, folder: Path) -> LogState:
        path = Path(folder) / "changelog.json"
        state = cls(path)
        try:
            raw = json.loads(path.read_bytes())
            state.own_seq = raw.get("own_seq")
            state.pending = list(raw.get("pending") or [])
            state.walked_at = raw.get("walked_at")
            state.devices = {
                k: DeviceSeen(list(v.get("seen") or []), v.get("stamp"), v.get("listed_at"))
                for k, v in (raw.get("devices") or {}).items()
            }
        except (OSError, ValueError, AttributeError, TypeError):
            pass  # missing or damaged: the next pull walks and rebuilds it
        return state

    def save(self) -> None:
        doc = {
            "own_seq": self.own_seq,
            "pending": self.pending,
            "walked_at": self.walked_at,
            "devices": {
                k: {"seen": v.seen, "stamp": v.stamp, "listed_at": v.listed_at} for k, v in sorted(self.devices.items())
            },
        }
        atomic_write_bytes(self.path, canonical_json_bytes(doc), durable=False)


# --- reading ---------------------------------------------------------------------------------------
@dataclass
class Changes:
    """What the log says changed: revision files by trip, and what to record once they are in."""

    files: dict[str, list[tuple[str, str]]] = field(default_factory=dict)  # trip -> [(year, name)]
    by_entry: list[tuple[str, str, set[str]]] = field(default_factory=list)  # (device, entry, trips)
    listings: dict[str, DeviceSeen] = field(default_factory=dict)

    def settle(self, state: LogState, failed_trips: set[str]) -> None:
        """Records as seen every entry whose trips all came in; a device folder with an entry
        left over is listed again next time."""
        for dev, listing in self.listings.items():
            left = {name for d, name, trips in self.by_entry if d == dev and trips & failed_trips}
            seen = [n for n in listing.seen if n not in left]
            state.devices[dev] = DeviceSeen(seen, None if left else listing.stamp, None if left else listing.listed_at)


def needs_listing(known_stamp: float | None, known_listed_at: float | None, stamp: float | None) -> bool:
    """Whether a hub folder must be listed again: its date (`stamp`, server clock) moved since it
    was last listed whole, or that listing came less than `FOLDER_SETTLE_S` after its last change
    (HTTP dates have one-second steps), or either is unknown."""
    if stamp is None or known_stamp is None or known_listed_at is None:
        return True
    return known_stamp != stamp or known_listed_at - stamp < FOLDER_SETTLE_S


def _needs_listing(known: DeviceSeen | None, stamp: float | None) -> bool:
    if known is None:
        return True
    return needs_listing(known.stamp, known.listed_at, stamp)


def read_changes(tgt: Any, state: LogState, own: str, max_bytes: int, *, now: float | None = None) -> Changes | None:
    """The changes the log holds that this device has not seen, or None when the pull must walk."""
    now = time.time() if now is None else now
    if state.walked_at is None or now - state.walked_at > REWALK_AFTER_S:
        return None
    folders = tgt.log_folders()
    if folders is None:
        return None  # a hub without a log (older builds only)
    out = Changes()
    for dev, stamp in sorted(folders.items()):
        if dev == own or not _DEVICE_RE.match(dev):
            continue
        known = state.devices.get(dev)
        if not _needs_listing(known, stamp):
            continue
        names, listed_at = tgt.log_list(dev)
        seen = set(known.seen) if known else set()
        new: list[tuple[int, str]] = sorted(
            (seq, n) for n in names if n not in seen and (seq := parse_name(n)) is not None
        )
        top = max((parse_name(n) or 0 for n in seen), default=0)
        want = set(range(top + 1, max((s for s, _ in new), default=top) + 1))
        if not want <= {s for s, _ in new}:
            log.info("pull: log of device %s has a hole after entry %d; listing the whole hub", dev, top)
            return None
        if len(new) > MAX_ENTRIES_PER_PULL:
            return None
        for _, name in new:
            try:
                files = parse_entry(dev, name, tgt.log_read(dev, name, max_bytes))
            except (
                ValueError,
                UnicodeDecodeError,
                errors.IntegrityError,
                errors.BadHubDocument,
                errors.Rejected,
            ) as exc:
                log.warning("pull: log entry %s/%s unusable (%s); listing the whole hub", dev, name, exc)
                return None
            trips = set()
            for year, tid, fname in files:
                out.files.setdefault(tid, []).append((year, fname))
                trips.add(tid)
            out.by_entry.append((dev, name, trips))
        out.listings[dev] = DeviceSeen(sorted(seen | {n for n in names if parse_name(n) is not None}), stamp, listed_at)
    return out


def snapshot(tgt: Any, own: str) -> dict[str, DeviceSeen]:
    """Every device folder's entries as they are now (taken before a walk, which then covers them)."""
    folders = tgt.log_folders() or {}
    out = {}
    for dev, stamp in folders.items():
        if dev == own or not _DEVICE_RE.match(dev):
            continue
        names, listed_at = tgt.log_list(dev)
        out[dev] = DeviceSeen(sorted(n for n in names if parse_name(n) is not None), stamp, listed_at)
    return out


# --- writing ---------------------------------------------------------------------------------------
def append(tgt: Any, state: LogState, own: str, files: list[str], device_id: str) -> str | None:
    """Writes one entry naming `files` (and any left from a push whose entry failed); returns its
    name, or None when there was nothing to log or the hub did not take it (kept for next time)."""
    state.pending = sorted(set(state.pending) | set(files))
    if not state.pending:
        return None
    state.save()  # a crash from here on logs these files next time
    try:
        if state.own_seq is None:
            names, _ = tgt.log_list(own)
            state.own_seq = max((parse_name(n) or 0 for n in names), default=0)
        seq = state.own_seq + 1
        data = entry_bytes(own, seq, state.pending)
        name = entry_name(seq, data)
        tgt.log_write(own, name, data, device_id)
    except errors.SyncError as exc:
        log.warning("push: the change log entry was not written (%s); the next push writes it", exc)
        return None
    state.own_seq, state.pending = seq, []
    state.save()
    return name
