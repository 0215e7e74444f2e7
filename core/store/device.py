"""The device store: one small TinyDB file per trip, a small index, one save path, a lock, quarantine.

Layout of a data folder::

    device.json         this device's id
    trips/<trip>.json   one TinyDB file per trip (table "trip", document 1 = the trip document)
    index/<trip>.json   the trip's summary (what `list_trips` shows), rewritten after the trip file;
                        a checked cache (it names the trip file version it was made from)
    sites.json          TinyDB, table "sites" (one document per site)
    settings.json       TinyDB, table "settings" (document 1 = program settings)
    quarantine/         unreadable files, moved here and never overwritten
    .lock               inter-process lock (filelock)

Every write of data goes through core.store.atomic.atomic_write_bytes (temporary file, fsync,
``os.replace``, fsync of the folder; :class:`AtomicJSONStorage` is TinyDB's storage on top of
it), so a reader or a crash sees the old file or the new one, never a part. Index entries are
replaced atomically without fsync: they are rebuilt from the trip files when outdated.
A save costs the same whatever the number of trips: it rewrites one trip file and one summary.
Every trip change goes through one funnel (:meth:`DeviceStore._commit`): validate → derive →
compare → audit → write.
"""
from __future__ import annotations

import hashlib
import json
import os
import re
import tempfile
import threading
import time
from contextlib import contextmanager
from dataclasses import asdict, dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Any
from collections.abc import Callable, Iterator

from filelock import FileLock, Timeout
from pydantic import ValidationError
from tinydb import TinyDB
from tinydb.storages import Storage
from tinydb.table import Document

from core.store.atomic import atomic_write_bytes, canonical_json_bytes, content_hash
from core.records.messages import Problem, one_line, problems_from_validation
from core.records.models import SCHEMA_VERSION, AuditEntry, ProgramSettings, Site, Stop, Trip, new_id
from core.rules.review import review_state
from core.store.paths import resolve_data_dir

__all__ = [
    "StoreError", "StoreLocked", "NewerSchemaError", "TripNotFound", "InvalidRecord", "StaleTrip",
    "StoreWriteError", "ApprovedTrip",
    "CorruptFile", "TripSummary", "AtomicJSONStorage", "DeviceStore", "diff_paths",
]


# --------------------------------------------------------------------------------------------
# Errors
# --------------------------------------------------------------------------------------------
class StoreError(Exception):
    """Root of every device-store error; str() is one sentence a person can act on."""


class StoreLocked(StoreError):
    """Another process (the app, a command-line sync) holds the store's lock for too long."""


class NewerSchemaError(StoreError):
    """A document written by a newer build than this one; it is left untouched."""

    def __init__(self, message: str, found: int | None = None, known: int = SCHEMA_VERSION):
        super().__init__(message)
        self.found = found
        self.known = known


class TripNotFound(StoreError):
    """No trip with that id on this device."""


class InvalidRecord(StoreError):
    """A record failed validation; `problems` holds every finding (code, field, label, message)."""

    def __init__(self, message: str, problems: list[Problem] | None = None):
        super().__init__(message)
        self.problems = list(problems or [])


class StoreWriteError(StoreError):
    """The disk refused a write (full, read-only, removed); the stored file is unchanged."""


class ApprovedTrip(StoreError):
    """An edit of an approved trip that is not a correction (core.rules.review.check_change)."""


class StaleTrip(StoreError):
    """The trip was changed (by another save or a sync) since this copy was loaded."""


def _json_file(raw: bytes, error: type[Exception]) -> Any:
    """The JSON in a store file's bytes; `error` (with a plain reason) for an empty or broken one."""
    if not raw.strip():
        raise error("the file is empty")
    try:
        return json.loads(raw)
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise error(f"the file is not valid JSON ({exc})") from None


class _Unreadable(Exception):
    """Internal: a trip file that does not parse (the reason is the message)."""


class CorruptFile(StoreError):
    """A stored file could not be read; it was moved to quarantine (see `path`)."""

    def __init__(self, message: str, path: Path | None = None):
        super().__init__(message)
        self.path = path


# --------------------------------------------------------------------------------------------
# TinyDB storage that never leaves a half-written file
# --------------------------------------------------------------------------------------------
class AtomicJSONStorage(Storage):
    """TinyDB storage: `read()` parses the file (None when absent); `write()` replaces it atomically.

    Unlike TinyDB's JSONStorage it never rewrites a file in place: each write goes to a temporary
    file that is fsynced, moved over the old one with ``os.replace``, and the folder fsynced.
    A file that does not parse raises ``ValueError`` (the store quarantines it).
    """

    def __init__(self, path: str | Path, **_: Any):
        super().__init__()
        self.path = Path(path)

    def read(self) -> dict[str, Any] | None:
        try:
            raw = self.path.read_bytes()
        except FileNotFoundError:
            return None
        data = _json_file(raw, ValueError)
        if not isinstance(data, dict):
            raise ValueError("the file does not hold a table map")
        return data

    def write(self, data: dict[str, Any]) -> None:
        atomic_write_bytes(self.path, canonical_json_bytes(data))

    def close(self) -> None:
        pass


def _tinydb(path: Path) -> TinyDB:
    return TinyDB(path, storage=AtomicJSONStorage)


# --------------------------------------------------------------------------------------------
# Summaries and diffs
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class TripSummary:
    """What the trip list shows, read from the small index (times are ISO 8601 text)."""

    id: str
    program: str
    crew: list[str]
    started_at: str
    ended_at: str | None
    revision: int
    status: str
    stop_count: int
    updated_at: str | None
    content_hash: str
    schema_version: int = SCHEMA_VERSION
    open_conflicts: int = 0
    bottle_labels: list[str] = field(default_factory=list)
    #: core.rules.review state; None in summaries written before it was recorded (read the trip).
    review_state: str | None = None

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


def _summary_of(doc: dict[str, Any], digest: str | None = None) -> TripSummary:
    stops = doc.get("stops") or []
    conflicts = [c for c in (doc.get("conflicts") or []) if not c.get("resolved_at")]
    if conflicts:
        status = "needs attention"
    elif doc.get("schema_version", 0) > SCHEMA_VERSION:
        status = "newer build"
    else:
        status = "in progress" if not doc.get("ended_at") else "ended"
    labels = [b.get("label", "") for s in stops for b in (s.get("bottles") or [])]
    return TripSummary(
        id=doc["id"], program=doc.get("program", ""), crew=list(doc.get("crew") or []),
        started_at=doc.get("started_at", ""), ended_at=doc.get("ended_at"),
        revision=int(doc.get("revision", 0)), status=status, stop_count=len(stops),
        updated_at=doc.get("updated_at"), content_hash=digest or content_hash(doc),
        schema_version=int(doc.get("schema_version", 0)), open_conflicts=len(conflicts),
        bottle_labels=labels, review_state=review_state(doc))


_BOOKKEEPING = ("revision", "updated_at")
_NOT_CHANGES = {"revision", "updated_at", "audit", "derived", "flags", "target_mg_l",
                "difference_mg_l", "accepted", "method", "core_version"}


def _content(doc: dict[str, Any]) -> dict[str, Any]:
    return {k: v for k, v in doc.items() if k not in _BOOKKEEPING}


def diff_paths(old: Any, new: Any, prefix: str = "", limit: int = 25) -> list[str]:
    """Field paths that differ between two documents; list elements are matched by `id`.

    Paths look like ``stops[<id>].temp``; derived values and bookkeeping are left out
    (they follow from the inputs). At most `limit` paths.
    """
    out: list[str] = []

    def walk(a: Any, b: Any, path: str) -> None:
        if len(out) >= limit or a == b:
            return
        if isinstance(a, dict) and isinstance(b, dict) and ("id" in a or "id" in b or not path):
            # Records (with an id) are walked field by field; values such as a quantity are
            # reported as one path ("stops[<id>].temp"), which keeps audit entries short.
            for key in sorted(set(a) | set(b)):
                if key in _NOT_CHANGES:
                    continue
                walk(a.get(key), b.get(key), f"{path}.{key}" if path else key)
            return
        if (isinstance(a, list) and isinstance(b, list)
                and all(isinstance(x, dict) and "id" in x for x in a + b)):
            old_by = {x["id"]: x for x in a}
            new_by = {x["id"]: x for x in b}
            for key in list(old_by) + [k for k in new_by if k not in old_by]:
                walk(old_by.get(key), new_by.get(key), f"{path}[{key}]")
            return
        out.append(path or "(document)")

    walk(old, new, prefix)
    return out


def _migrated(doc: dict[str, Any]) -> dict[str, Any]:
    from core.records.migrations import migrate

    return migrate(doc)


def _replace_unsynced(path: Path, data: bytes) -> None:
    """Temporary file → ``os.replace``, without fsync: for the index, a checked cache only."""
    atomic_write_bytes(path, data, durable=False)


def _merge_audit(stored: list[dict[str, Any]], incoming: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Stored entries in their order, then incoming entries not yet stored (by id), oldest first."""
    known = {e.get("id") for e in stored}
    extra = [e for e in incoming if e.get("id") not in known]
    if not extra:
        return list(stored)
    extra.sort(key=lambda e: (str(e.get("at", "")), str(e.get("id", ""))))
    return list(stored) + extra


def _non_finite_problems(doc: Any) -> list[Problem]:
    """Problems for every NaN or infinite number in a document, named by field."""
    import math

    from core.records.messages import path_label, render

    out: list[Problem] = []

    def walk(value: Any, loc: tuple) -> None:
        if isinstance(value, float) and not math.isfinite(value):
            label = path_label(loc)
            out.append(Problem("number.not_finite", ".".join(map(str, loc)), label,
                               render("number.not_finite", label=label, input=value)))
        elif isinstance(value, dict):
            for k, v in value.items():
                walk(v, loc + (k,))
        elif isinstance(value, list):
            for i, v in enumerate(value):
                walk(v, loc + (i,))

    walk(doc, ())
    return out


_SAFE_ID = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$")


def _utcnow() -> datetime:
    return datetime.now(timezone.utc)


# --------------------------------------------------------------------------------------------
# The store
# --------------------------------------------------------------------------------------------
class DeviceStore:
    """The trips, sites and settings on one device. Open with :meth:`DeviceStore.open`.

    Every trip change goes through :meth:`save_trip`, :meth:`save_stop` or :meth:`put_document`,
    which all run validate → derive → write (one funnel, ``_commit``) under the inter-process
    lock. Reads need no lock (files are only ever replaced whole). Store work does disk I/O
    (two fsyncs per save): call it off the UI thread.
    """

    def __init__(self, data_dir: Path, device_id: str, *, clock: Callable[[], datetime] | None = None,
                 lock_timeout_s: float = 5.0):
        self.data_dir = Path(data_dir)
        self.device_id = device_id
        self._clock = clock or _utcnow
        self.lock_timeout_s = lock_timeout_s
        self._trips_dir = self.data_dir / "trips"
        self._index_dir = self.data_dir / "index"
        self._quarantine_dir = self.data_dir / "quarantine"
        self._lock = FileLock(str(self.data_dir / ".lock"), timeout=lock_timeout_s)
        self._tlock = threading.RLock()
        self._sites_cache: tuple[tuple[int, int], dict[str, Site]] | None = None
        self._finalizer: Any = None     # in_memory(): removes the temporary folder with the store
        self._settings_cache: tuple[tuple[int, int], ProgramSettings] | None = None
        self._cache: dict[str, tuple[bytes, bytes, dict[str, Any]]] = {}
        self._bases: tuple[Any, dict[str, str]] = (None, {})
        # Summaries this process has read or written, by trip id, with the trip file's
        # (inode, mtime, size) they belong to: a listing then costs one stat per trip.
        self._summaries: dict[str, tuple[tuple[int, int, int], TripSummary]] = {}

    # -- opening ---------------------------------------------------------------------------
    @classmethod
    def open(cls, data_dir: Path | str | None = None, device_id: str | None = None, *,
             clock: Callable[[], datetime] | None = None, lock_timeout_s: float = 5.0) -> DeviceStore:
        """Opens (creating if needed) the store at `data_dir` (else $STREAMTAB_DATA, else the user folder).

        Leftover temporary files from an interrupted write are removed and the index is brought
        up to date with the trip files. `device_id` is remembered in device.json the first time;
        when omitted, the remembered one (or a new one) is used.
        """
        root = resolve_data_dir(data_dir)
        for sub in ("", "trips", "index", "quarantine"):
            (root / sub).mkdir(parents=True, exist_ok=True)
        store = cls(root, device_id or "", clock=clock, lock_timeout_s=lock_timeout_s)
        with store._locked():
            remembered = store._read_device_id()
            if not remembered:
                remembered = device_id or f"dev-{new_id()[:13].replace('-', '')}"
                atomic_write_bytes(root / "device.json",
                                   canonical_json_bytes({"device_id": remembered}))
            store.device_id = device_id or remembered
            store._clean_temp_files()
            store._repair_index()
        return store

    @classmethod
    def in_memory(cls, device_id: str | None = None, **kwargs: Any) -> DeviceStore:
        """The same store (same save path, same files) in a RAM-backed scratch folder, for fast tests.

        Uses /dev/shm when it is there (else the system temporary folder); the folder is removed
        by :meth:`close` or when the store object is garbage-collected.
        """
        import shutil
        import weakref

        shm = Path("/dev/shm")
        base = str(shm) if shm.is_dir() and os.access(shm, os.W_OK) else None
        root = Path(tempfile.mkdtemp(prefix="streamtab-store-", dir=base))
        store = cls.open(root, device_id or "dev-memory", **kwargs)
        store._finalizer = weakref.finalize(store, shutil.rmtree, str(root), True)
        return store

    def close(self) -> None:
        """Releases the store; a scratch store from :meth:`in_memory` is deleted."""
        fin = getattr(self, "_finalizer", None)
        if fin is not None:
            fin()

    def _read_device_id(self) -> str | None:
        path = self.data_dir / "device.json"
        try:
            return str(json.loads(path.read_bytes())["device_id"]) or None
        except FileNotFoundError:
            return None
        except (ValueError, KeyError, TypeError):
            self._quarantine(path, "device.json could not be read")
            return None

    def _clean_temp_files(self) -> None:
        """Removes temporary files an interrupted write of *this store* left (lock held).

        Only the store's own names: other parts (sync's outbox) may write in the data folder.
        """
        patterns = [(self._trips_dir, ".*.tmp"), (self._index_dir, ".*.tmp")]
        patterns += [(self.data_dir, f".{name}.*.tmp") for name in ("device.json", "sites.json", "settings.json")]
        for folder, pattern in patterns:
            for tmp in folder.glob(pattern):
                try:
                    tmp.unlink()
                except FileNotFoundError:
                    pass

    def _repair_index(self) -> None:
        """Brings every summary up to date with its trip file (see :meth:`list_trips`)."""
        self.list_trips()

    # -- locking ---------------------------------------------------------------------------
    def locked(self):
        """Holds the store's inter-process lock for a block of several store calls (re-entrant).

        ``with store.locked(): ...`` — e.g. a sync applying a plan. Raises StoreLocked when another
        process holds it longer than `lock_timeout_s`.
        """
        return self._locked()

    @contextmanager
    def _locked(self) -> Iterator[None]:
        with self._tlock:
            try:
                self._lock.acquire(timeout=self.lock_timeout_s)
            except Timeout:
                raise StoreLocked(
                    f"The device store at {self.data_dir} is busy in another program (the app or a"
                    f" sync) and did not come free within {self.lock_timeout_s:g} s; let it finish"
                    f" and try again.") from None
            try:
                yield
            finally:
                self._lock.release()

    # -- quarantine ------------------------------------------------------------------------
    def _quarantine(self, path: Path, reason: str) -> Path:
        self._quarantine_dir.mkdir(parents=True, exist_ok=True)
        stamp = time.strftime("%Y%m%dT%H%M%S", time.gmtime())
        target = self._quarantine_dir / f"{path.name}.{stamp}"
        n = 1
        while target.exists():
            n += 1
            target = self._quarantine_dir / f"{path.name}.{stamp}.{n}"
        try:
            os.replace(path, target)
        except FileNotFoundError:
            return target
        atomic_write_bytes(target.with_name(target.name + ".reason.txt"), (reason + "\n").encode())
        return target

    def quarantined(self) -> list[Path]:
        """Files moved aside because they could not be read (oldest first), by name."""
        return sorted((p for p in self._quarantine_dir.glob("*") if not p.name.endswith(".reason.txt")),
                      key=lambda p: (p.stat().st_mtime_ns, p.name))

    # -- reading trips ---------------------------------------------------------------------
    def _trip_path(self, trip_id: str) -> Path:
        if not isinstance(trip_id, str) or not _SAFE_ID.match(trip_id):
            raise TripNotFound(f"No trip with id {trip_id!r} on this device (ids are letters, digits, '-', '_', '.').")
        return self._trips_dir / f"{trip_id}.json"

    def _corrupt(self, path: Path, reason: str, seen: bytes | None = None) -> CorruptFile | None:
        """Quarantines an unreadable trip file — under the lock, and only if it still holds the
        bytes that were found unreadable (a writer may have just replaced it with a good one).
        Returns the error to raise, or None when the file changed meanwhile (read it again)."""
        with self._locked():
            if seen is not None:
                try:
                    if path.read_bytes() != seen:
                        return None
                except FileNotFoundError:
                    return None
            target = self._quarantine(path, reason)
            (self._index_dir / path.name).unlink(missing_ok=True)
            self._cache.pop(path.stem, None)
        return CorruptFile(f"The trip file {path.name} could not be read ({reason}); it was moved to"
                           f" {target} and the rest of the store keeps working.", target)

    def _read_trip_file(self, trip_id: str) -> tuple[bytes, dict[str, Any]] | None:
        """(the trip document's canonical bytes, the document) as stored; None when absent.

        The file's bytes are read every time and compared with the last version this store
        read or wrote; only a changed file is parsed again. Callers must not change the dict.
        An unreadable file is quarantined (CorruptFile).
        """
        path = self._trip_path(trip_id)
        for _ in range(3):  # bounded: a file replaced while being judged is read again
            try:
                file_bytes = path.read_bytes()
            except FileNotFoundError:
                self._cache.pop(trip_id, None)
                return None
            hit = self._cache.get(trip_id)
            if hit is not None and hit[0] == file_bytes:
                return hit[1], hit[2]
            try:
                raw, doc = self._parse_trip_file(trip_id, file_bytes)
            except _Unreadable as bad:
                err = self._corrupt(path, str(bad), file_bytes)
                if err is None:
                    continue
                raise err from None
            if len(self._cache) > 64:
                self._cache.clear()
            self._cache[trip_id] = (file_bytes, raw, doc)
            return raw, doc
        raise StoreError(f"The trip file {path.name} keeps changing while being read; try again.")

    @staticmethod
    def _parse_trip_file(trip_id: str, file_bytes: bytes) -> tuple[bytes, dict[str, Any]]:
        data = _json_file(file_bytes, _Unreadable)
        table = data.get("trip") if isinstance(data, dict) else None
        doc = table.get("1") if isinstance(table, dict) else None
        if not isinstance(doc, dict):
            raise _Unreadable("no trip document inside")
        if doc.get("id") != trip_id:
            raise _Unreadable(f"the id inside is {doc.get('id')!r}")
        try:
            raw = canonical_json_bytes(doc)
        except ValueError as exc:
            raise _Unreadable(str(exc)) from None
        return raw, doc

    def _read_trip_doc_raw(self, trip_id: str) -> dict[str, Any] | None:
        """The stored document as written (no migration), None when absent; quarantines junk."""
        got = self._read_trip_file(trip_id)
        return None if got is None else got[1]

    def _load(self, trip_id: str) -> tuple[Trip, dict[str, Any]]:
        from core.records.migrations import migrate

        got = self._read_trip_file(trip_id)
        if got is None:
            raise TripNotFound(f"No trip {trip_id} on this device; see 'streamtab trip list'.")
        raw_bytes, raw = got
        doc = migrate(raw)  # raises NewerSchemaError, leaving the file untouched
        try:
            trip = Trip.model_validate_json(raw_bytes) if doc is raw else Trip.from_document(doc)
        except (ValidationError, ValueError) as exc:
            probs = problems_from_validation(exc) if isinstance(exc, ValidationError) else []
            reason = "failed validation: " + (one_line(probs) if probs else str(exc))
            path = self._trip_path(trip_id)
            seen = b'{"trip":{"1":' + raw_bytes[:-1] + b"}}\n"
            hit = self._cache.get(trip_id)
            err = self._corrupt(path, reason, hit[0] if hit is not None else seen)
            if err is None:
                return self._load(trip_id)
            raise err from None
        return trip, raw

    def load_trip(self, trip_id: str) -> Trip:
        """The trip with that id (migrated from an older schema in memory if needed).

        Raises TripNotFound, NewerSchemaError (file left untouched) or CorruptFile (moved to
        quarantine).
        """
        return self._load(trip_id)[0]

    def trip_document(self, trip_id: str) -> dict[str, Any]:
        """The stored JSON document of a trip, as exchanged with hubs (no migration applied).

        ``core.store.atomic.canonical_json_bytes`` of it is the wire form.
        """
        got = self._read_trip_file(trip_id)
        if got is None:
            raise TripNotFound(f"No trip {trip_id} on this device; see 'streamtab trip list'.")
        return json.loads(got[0])

    def has_trip(self, trip_id: str) -> bool:
        try:
            return self._trip_path(trip_id).exists()
        except TripNotFound:
            return False

    def list_trips(self) -> list[TripSummary]:
        """Every trip's summary, newest start first, from the small index.

        Each summary records the (inode, mtime, size) of the trip file it was made from; one
        ``stat`` per trip checks it, and a missing, unreadable or outdated summary is rebuilt
        from the trip file. (A crash between writing a trip and its summary always shows: the
        new trip file has a new inode.) Unreadable trip files are quarantined and left out.
        """
        out: list[TripSummary] = []
        keys: dict[str, tuple[int, int, int]] = {}
        with os.scandir(self._trips_dir) as entries:  # one stat per trip, no Path objects
            for entry in entries:
                trip_id = entry.name[:-5]
                if not entry.name.endswith(".json") or not _SAFE_ID.match(trip_id):
                    continue
                try:
                    st = entry.stat()
                except FileNotFoundError:
                    continue
                keys[trip_id] = (st.st_ino, st.st_mtime_ns, st.st_size)
        with os.scandir(self._index_dir) as entries:
            for entry in entries:
                if entry.name.endswith(".json") and entry.name[:-5] not in keys:
                    Path(entry.path).unlink(missing_ok=True)  # the trip file is gone (quarantined)
        for trip_id, key in keys.items():
            memo = self._summaries.get(trip_id)
            summary = memo[1] if memo is not None and memo[0] == key else None
            if summary is None:
                try:
                    data = json.loads((self._index_dir / f"{trip_id}.json").read_bytes())
                    if data.get("file") == list(key):
                        summary = TripSummary(**data["summary"])
                        self._summaries[trip_id] = (key, summary)
                except (OSError, ValueError, TypeError, KeyError, AttributeError):
                    summary = None
            if summary is None:
                try:
                    got = self._read_trip_file(trip_id)
                except CorruptFile:
                    continue
                if got is None:
                    continue
                summary = self._write_summary(got[1], None, self._file_key(trip_id))
            out.append(summary)
        out.sort(key=lambda s: (s.started_at, s.id), reverse=True)
        return out

    def _file_key(self, trip_id: str) -> tuple[int, int, int] | None:
        try:
            st = self._trip_path(trip_id).stat()
        except FileNotFoundError:
            return None
        return (st.st_ino, st.st_mtime_ns, st.st_size)

    def bottle_labels_in_use(self) -> dict[str, str]:
        """Bottle label → trip id, over every trip on the device (for duplicate checks)."""
        labels: dict[str, str] = {}
        for s in self.list_trips():
            for label in s.bottle_labels:
                labels.setdefault(label, s.id)
        return labels

    # -- the one save path -----------------------------------------------------------------
    def save_trip(self, trip: Trip, change: str) -> Trip:
        """THE save path: validate → derive → write, with an audit entry and revision + 1.

        `change` says what was done in a few words ("stop LK-02 readings"). Returns the trip as
        stored. A save whose content equals the stored trip writes nothing. Raises InvalidRecord
        (nothing written), StaleTrip when the stored revision moved on since `trip` was loaded,
        NewerSchemaError, StoreLocked.
        """
        checked = self._validated(trip)
        with self._locked():
            stored = self._stored_or_none(checked.id)
            if stored is not None and int(stored.get("revision", 0)) != checked.revision:
                raise StaleTrip(
                    f"Trip {checked.id} was changed elsewhere (stored revision {stored.get('revision')},"
                    f" this copy {checked.revision}); reload it and make the change again.")
            base = int(stored.get("revision", 0)) if stored is not None else checked.revision
            return self._commit(checked, stored, change, base)

    def put_document(self, doc: dict[str, Any], change: str) -> Trip:
        """Runs a foreign trip document (an import, a sync pull) through the same save path.

        The document is migrated, validated strictly and derived again; when its content (all
        but revision and updated_at) equals the stored trip, nothing is written and the stored
        trip is returned. Otherwise it is written with revision max(stored, incoming) + 1 and an
        audit entry. Raises InvalidRecord, NewerSchemaError (nothing written), StoreLocked.
        """
        from core.records.migrations import migrate

        if not isinstance(doc, dict):
            raise InvalidRecord("A trip document must be a JSON object.")
        checked = self._validate_doc(migrate(doc))
        with self._locked():
            stored = self._stored_or_none(checked.id)
            base = max(checked.revision, int(stored.get("revision", 0)) if stored is not None else 0)
            return self._commit(checked, stored, change, base, review_guard=False)

    def adopt_document(self, doc: dict[str, Any], *, expected_revision: int | None) -> Trip | None:
        """Stores another device's saved version of a trip byte for byte (a sync fast-forward).

        The document keeps its revision, audit and derived values: it was saved through the
        save path on the device that made it, and storing it unchanged is what lets two devices
        hold the same bytes as the hub (no new revision for a pull). It must contain every save
        of the stored copy (each stored audit id is in its audit), so nothing saved here is
        dropped; `expected_revision` is the stored revision the caller based it on (None: the
        device holds no copy). Returns None, writing nothing, when the document needs the full
        save path instead (an older schema to migrate, or it lacks saves of the stored copy);
        raises StaleTrip when the stored revision is not `expected_revision`, InvalidRecord
        (nothing written), NewerSchemaError, StoreLocked.
        """
        from core.records.migrations import migrate

        if not isinstance(doc, dict):
            raise InvalidRecord("A trip document must be a JSON object.")
        if migrate(doc) is not doc:
            return None
        checked = self._validate_doc(doc)
        doc_bytes = canonical_json_bytes(doc)
        with self._locked():
            stored = self._read_trip_doc_raw(checked.id)
            found = None if stored is None else int(stored.get("revision", 0))
            if found != expected_revision:
                raise StaleTrip(
                    f"Trip {checked.id} was changed elsewhere (stored revision {found},"
                    f" expected {expected_revision}); read it again and merge.")
            if stored is not None:
                ids = {e.get("id") for e in doc.get("audit") or [] if isinstance(e, dict)}
                if not all(isinstance(e, dict) and e.get("id") in ids for e in stored.get("audit") or []):
                    return None
                if canonical_json_bytes(stored) == doc_bytes:
                    return checked
            self._write_trip_bytes(json.loads(doc_bytes), doc_bytes)
        return checked

    def _write_trip_bytes(self, new_doc: dict[str, Any], doc_bytes: bytes) -> None:
        """Writes one trip document (its canonical bytes) and its summary. Lock held."""
        path = self._trip_path(new_doc["id"])
        # The TinyDB layout {"trip": {"1": doc}}, byte for byte what AtomicJSONStorage.write gives.
        file_bytes = b'{"trip":{"1":' + doc_bytes[:-1] + b"}}\n"
        try:
            atomic_write_bytes(path, file_bytes)
        except OSError as exc:
            raise StoreWriteError(f"Could not write {path.name} ({exc.strerror or exc}); the stored trip"
                                  " is unchanged — free space or check the storage, then save again.") from None
        self._cache[new_doc["id"]] = (file_bytes, doc_bytes, new_doc)
        self._write_summary(new_doc, "sha256:" + hashlib.sha256(doc_bytes).hexdigest(),
                            self._file_key(new_doc["id"]))

    def save_stop(self, trip_id: str, stop: Stop, change: str | None = None) -> Trip:
        """Adds or replaces (by id) one stop of a stored trip, through the same save path.

        The stop is validated strictly, the rest of the trip as stored; the stored revision is
        the base (this is the call for autosaving one stop: it cannot be stale).
        """
        if not isinstance(stop, Stop):
            raise InvalidRecord("save_stop needs a Stop record.")
        try:
            stop_doc = stop.model_dump(mode="json", warnings=False)
        except Exception as exc:  # noqa: BLE001
            raise InvalidRecord(f"The stop could not be written as JSON ({exc}).") from None
        try:
            new_stop = Stop.model_validate_json(canonical_json_bytes(stop_doc))
        except ValidationError as exc:
            probs = problems_from_validation(exc)
            raise InvalidRecord(one_line(probs), probs) from None
        except (ValueError, TypeError):
            probs = _non_finite_problems(stop_doc)
            raise InvalidRecord(one_line(probs) if probs else "The stop holds a value JSON cannot carry.",
                                probs) from None
        with self._locked():
            trip, stored = self._load(trip_id)  # a fresh object, validated from the stored bytes
            stops = list(trip.stops)
            for i, s in enumerate(stops):
                if s.id == new_stop.id:
                    # Fields a newer build stored on this stop survive a form that never knew them.
                    kept = {k: v for k, v in (s.model_extra or {}).items() if k not in (new_stop.model_extra or {})}
                    stops[i] = new_stop.model_copy(update=kept) if kept else new_stop
                    break
            else:
                stops.append(new_stop)
            checked = trip.model_copy(update={"stops": stops})
            return self._commit(checked, _migrated(stored), change or f"stop at {stop.site_id} saved",
                                int(stored.get("revision", 0)))

    def _stored_or_none(self, trip_id: str) -> dict[str, Any] | None:
        from core.records.migrations import migrate

        raw = self._read_trip_doc_raw(trip_id)
        if raw is None:
            return None
        return migrate(raw)

    @staticmethod
    def _validate_doc(doc: dict[str, Any]) -> Trip:
        try:
            return Trip.from_document(doc)
        except ValidationError as exc:
            probs = problems_from_validation(exc)
            raise InvalidRecord(one_line(probs), probs) from None
        except (ValueError, TypeError) as exc:  # NaN, infinity or a non-JSON value in the document
            probs = _non_finite_problems(doc)
            if probs:
                raise InvalidRecord(one_line(probs), probs) from None
            raise InvalidRecord(f"The trip document holds a value JSON cannot carry ({exc}).") from None

    def _validated(self, trip: Trip) -> Trip:
        if not isinstance(trip, Trip):
            raise InvalidRecord("save_trip needs a Trip record.")
        # Re-validate strictly from JSON: attributes may have been assigned after construction.
        # (NaN and infinity serialise as strings here, so validation names the field.)
        try:
            data = trip.model_dump_json(warnings=False)
        except Exception as exc:  # noqa: BLE001 - a value assigned after construction that cannot be written
            raise InvalidRecord(f"The trip could not be written as JSON ({exc}).") from None
        try:
            return Trip.model_validate_json(data)
        except ValidationError as exc:
            probs = problems_from_validation(exc)
            raise InvalidRecord(one_line(probs), probs) from None

    def _commit(self, trip: Trip, stored: dict[str, Any] | None, change: str, base_revision: int,
                *, review_guard: bool = True) -> Trip:
        """The funnel: derive, compare, audit, write the trip file, then its summary. Lock held.

        `review_guard` refuses an edit of an approved trip that is not a correction
        (core.rules.review); documents from a hub (put_document) carry the office's own steps
        and are merged, not refused.
        """
        from core.rules.qc import derive
        from core.rules.review import ReviewRefused, check_change

        sites = self.sites_by_id()
        settings = self.settings()
        bases_key = (self._sites_cache[0] if self._sites_cache else None,
                     self._settings_cache[0] if self._settings_cache else None)
        if self._bases[0] != bases_key:
            self._bases = (bases_key, {})
        new_doc, derived = derive(trip, sites, settings, previous=stored, bases=self._bases[1])
        device_id = trip.device_id or self.device_id
        if stored is not None:
            device_id = stored.get("device_id") or device_id
        new_doc["device_id"] = device_id
        new_doc["schema_version"] = SCHEMA_VERSION
        incoming_audit = new_doc.get("audit") or []
        if stored is not None:
            # The audit trail is append-only: entries already stored are never dropped.
            new_doc["audit"] = _merge_audit(stored.get("audit") or [], incoming_audit)
        if stored is not None and _content(stored) == _content(new_doc):
            return Trip.from_document(stored)
        if review_guard:
            try:
                check_change(stored, new_doc)
            except ReviewRefused as exc:
                raise ApprovedTrip(str(exc)) from None
        now = self._clock().astimezone(timezone.utc)
        revision = base_revision + 1
        entry = AuditEntry(at=now, device_id=self.device_id, change=str(change)[:400] or "saved",
                           revision=revision,
                           fields=diff_paths(stored, new_doc) if stored is not None else ["(new trip)"])
        entry_doc = entry.model_dump(mode="json")
        same_audit = new_doc.get("audit") == incoming_audit
        new_doc["audit"] = list(new_doc.get("audit") or []) + [entry_doc]
        new_doc["revision"] = revision
        new_doc["updated_at"] = entry_doc["at"]
        doc_bytes = canonical_json_bytes(new_doc)
        self._write_trip_bytes(new_doc, doc_bytes)
        if not same_audit:
            return Trip.model_validate_json(doc_bytes)
        # `derived` was validated from JSON in this call and shares nothing with the caller.
        return derived.model_copy(update={
            "device_id": device_id, "schema_version": SCHEMA_VERSION, "revision": revision,
            "updated_at": entry.at, "audit": list(derived.audit) + [entry]})

    def _write_summary(self, doc: dict[str, Any], digest: str | None,
                       key: tuple[int, int, int] | None) -> TripSummary:
        """Writes a trip's summary. The index is a cache of the trip files, checked against
        them on every read (see :meth:`list_trips`), so it is replaced atomically but not
        fsynced: a summary lost or torn by a power cut is rebuilt, and a save costs two fsyncs
        (the trip file and its folder) instead of four."""
        summary = _summary_of(doc, digest)
        if key is not None:
            self._summaries[doc["id"]] = (key, summary)
        data = canonical_json_bytes({"summary": summary.to_dict(), "file": list(key) if key else None})
        try:
            _replace_unsynced(self._index_dir / f"{doc['id']}.json", data)
        except OSError:
            pass  # the index is a checked cache: a missing entry is rebuilt on the next listing
        return summary

    # -- sites and settings ----------------------------------------------------------------
    @staticmethod
    def _stamp(path: Path) -> tuple[int, int]:
        try:
            st = path.stat()
            return (st.st_mtime_ns, st.st_size)
        except FileNotFoundError:
            return (0, 0)

    def _read_table(self, name: str, path: Path) -> dict[str, Any]:
        try:
            data = AtomicJSONStorage(path).read()
        except ValueError as exc:
            target = self._quarantine(path, str(exc))
            raise CorruptFile(f"The file {path.name} could not be read ({exc}); it was moved to {target}.",
                              target) from None
        return (data or {}).get(name, {}) or {}

    def sites_by_id(self) -> dict[str, Site]:
        path = self.data_dir / "sites.json"
        stamp = self._stamp(path)
        if self._sites_cache is not None and self._sites_cache[0] == stamp:
            return dict(self._sites_cache[1])
        try:
            table = self._read_table("sites", path)
        except CorruptFile:
            table = {}
        sites: dict[str, Site] = {}
        for doc in table.values():
            try:
                site = Site.model_validate_json(canonical_json_bytes(doc))
            except (ValidationError, ValueError):
                continue
            sites[site.id] = site
        self._sites_cache = (stamp, sites)
        return dict(sites)

    def sites(self) -> list[Site]:
        """Every site, by id."""
        return sorted(self.sites_by_id().values(), key=lambda s: s.id)

    def save_site(self, site: Site) -> Site:
        """Adds or replaces one site (by its id)."""
        return self.save_sites([site])[0]

    def save_sites(self, sites: list[Site]) -> list[Site]:
        """Adds or replaces several sites in one atomic write (all or nothing)."""
        checked: list[Site] = []
        for site in sites:
            try:
                checked.append(Site.model_validate_json(canonical_json_bytes(site.model_dump(mode="json"))))
            except ValidationError as exc:
                probs = problems_from_validation(exc)
                raise InvalidRecord(one_line(probs), probs) from None
        path = self.data_dir / "sites.json"
        with self._locked():
            data = AtomicJSONStorage(path).read() or {}
            table = dict(data.get("sites") or {})
            by_site = {doc.get("id"): key for key, doc in table.items()}
            next_key = max((int(k) for k in table), default=0) + 1
            for site in checked:
                key = by_site.get(site.id)
                if key is None:
                    key = str(next_key)
                    next_key += 1
                    by_site[site.id] = key
                table[key] = site.model_dump(mode="json")
            data["sites"] = table
            try:
                AtomicJSONStorage(path).write(data)
            except OSError as exc:
                raise StoreWriteError(f"Could not write sites.json ({exc.strerror or exc}); the site list"
                                      " is unchanged.") from None
            self._sites_cache = None
        return checked

    def settings(self) -> ProgramSettings:
        """The program settings (defaults until saved)."""
        path = self.data_dir / "settings.json"
        stamp = self._stamp(path)
        if self._settings_cache is not None and self._settings_cache[0] == stamp:
            return self._settings_cache[1]
        try:
            table = self._read_table("settings", path)
        except CorruptFile:
            table = {}
        doc = table.get("1")
        settings = ProgramSettings()
        if doc is not None:
            if int(doc.get("schema_version", 0)) > SCHEMA_VERSION:
                raise NewerSchemaError("The settings were saved by a newer streamtab; update this one.",
                                       doc.get("schema_version"))
            try:
                settings = ProgramSettings.model_validate_json(canonical_json_bytes(doc))
            except (ValidationError, ValueError):
                settings = ProgramSettings()
        self._settings_cache = (stamp, settings)
        return settings

    def save_settings(self, s: ProgramSettings) -> ProgramSettings:
        """Replaces the program settings."""
        try:
            checked = ProgramSettings.model_validate_json(canonical_json_bytes(s.model_dump(mode="json")))
        except ValidationError as exc:
            probs = problems_from_validation(exc)
            raise InvalidRecord(one_line(probs), probs) from None
        with self._locked():
            try:
                _tinydb(self.data_dir / "settings.json").table("settings").upsert(
                    Document(checked.model_dump(mode="json"), doc_id=1))
            except OSError as exc:
                raise StoreWriteError(f"Could not write settings.json ({exc.strerror or exc}); the settings"
                                      " are unchanged.") from None
            self._settings_cache = None
        return checked

    # -- checks ----------------------------------------------------------------------------
    def verify(self) -> list[Path]:
        """Reads every trip file; unreadable ones are quarantined. Returns the newly quarantined."""
        moved: list[Path] = []
        for path in sorted(self._trips_dir.glob("*.json")):
            try:
                self._load(path.stem)
            except CorruptFile as exc:
                if exc.path is not None:
                    moved.append(exc.path)
            except (NewerSchemaError, TripNotFound):
                continue
        return moved
