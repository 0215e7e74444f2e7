"""The device store: trips, sites and settings of one device behind one save path and a lock.

Layout of a data folder::

    device.json         this device's id
    trips/<trip>.json   one TinyDB file per trip (core.store.trips)
    index/<trip>.json   the trip's summary (core.store.index), a checked cache
    sites.json          TinyDB, table "sites" (core.store.tables)
    settings.json       TinyDB, table "settings" (core.store.tables)
    quarantine/         unreadable files, moved here and never overwritten (core.store.quarantine)
    .lock               inter-process lock (filelock)

Every write of data goes through core.store.atomic.atomic_write_bytes (temporary file, fsync,
``os.replace``, fsync of the folder), so a reader or a crash sees the old file or the new one,
never a part. A save costs the same whatever the number of trips: it rewrites one trip file
and one summary. Every trip change goes through one funnel (:meth:`DeviceStore._commit`):
validate → derive → compare → audit → write.
"""

from __future__ import annotations

import hashlib
import json
import os
import tempfile
import threading
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from filelock import FileLock, Timeout
from pydantic import ValidationError

from core.records.merge import common_ancestor, history, merge_trips, retain
from core.records.messages import Problem, one_line, problems_from_validation
from core.records.migrations import migrate
from core.records.models import (
    BOOKKEEPING,
    LOCAL_STOP_KEYS,
    SCHEMA_VERSION,
    AuditChange,
    AuditEntry,
    ProgramSettings,
    Site,
    Stop,
    Trip,
    keys_by_role,
    new_id,
)
from core.store.atomic import atomic_write_bytes, canonical_json_bytes
from core.store.audit import diff_changes, merge_audit
from core.store.drafts import Drafts, split_drafts, with_drafts
from core.store.errors import (
    ApprovedTrip,
    CorruptFile,
    InvalidRecord,
    NewerSchemaError,
    StaleTrip,
    StoreError,
    StoreLocked,
    StoreWriteError,
    TripNotFound,
)
from core.store.index import FileKey, SummaryIndex, TripSummary
from core.store.paths import resolve_data_dir
from core.store.quarantine import quarantine, utc_stamp
from core.store.tables import Tables
from core.store.trips import SAFE_ID, TripFiles, Unreadable

__all__ = ["DeviceStore", "MergeOutcome"]


def _migrated(doc: dict[str, Any]) -> dict[str, Any]:
    return migrate(doc)


def _non_finite_problems(doc: Any) -> list[Problem]:
    """Problems for every NaN or infinite number in a document, named by field."""
    import math

    from core.records.messages import path_label, render

    out: list[Problem] = []

    def walk(value: Any, loc: tuple) -> None:
        if isinstance(value, float) and not math.isfinite(value):
            label = path_label(loc)
            out.append(
                Problem(
                    "number.not_finite",
                    ".".join(map(str, loc)),
                    label,
                    render("number.not_finite", label=label, input=value),
                )
            )
        elif isinstance(value, dict):
            for k, v in value.items():
                walk(v, loc + (k,))
        elif isinstance(value, list):
            for i, v in enumerate(value):
                walk(v, loc + (i,))

    walk(doc, ())
    return out


def _content(doc: dict[str, Any]) -> dict[str, Any]:
    """A trip document without its bookkeeping (id, revision, time of the last save, ...)."""
    bookkeeping = keys_by_role(BOOKKEEPING)
    return {k: v for k, v in doc.items() if k not in bookkeeping}


@dataclass(frozen=True)
class MergeOutcome:
    """What :meth:`DeviceStore.merge_document` did: the trip as stored and `result` — "new",
    "unchanged" (the stored trip already held it), "fast-forward" (it held the stored trip) or
    "merged" (three-way; `conflicts` lists the clashes it found)."""

    trip: Trip
    result: str
    conflicts: list[dict[str, Any]] = field(default_factory=list)


def _utcnow() -> datetime:
    return datetime.now(UTC)


# --------------------------------------------------------------------------------------------
# The store
# --------------------------------------------------------------------------------------------
#: The change feed (DeviceStore.changes_since) and the size at which it starts a new file.
CHANGES_FILE = "changes.log"
CHANGES_ROTATE_BYTES = 4 * 1024 * 1024


class DeviceStore:
    """The trips, sites and settings on one device. Open with :meth:`DeviceStore.open`.

    Every trip change goes through :meth:`save_trip`, :meth:`save_stop` or :meth:`put_document`,
    which all run validate → derive → write (one funnel, ``_commit``) under the inter-process
    lock. Reads need no lock (files are only ever replaced whole). Store work does disk I/O
    (two fsyncs per save): call it off the UI thread.
    """

    def __init__(
        self,
        data_dir: Path,
        device_id: str,
        *,
        clock: Callable[[], datetime] | None = None,
        lock_timeout_s: float = 5.0,
    ):
        self.data_dir = Path(data_dir)
        self.device_id = device_id
        #: This device's name as a person set it (None until set; see :meth:`set_device_name`).
        self.device_name: str | None = None
        self._clock = clock or _utcnow
        self.lock_timeout_s = lock_timeout_s
        self._trips_dir = self.data_dir / "trips"
        self._index_dir = self.data_dir / "index"
        self._quarantine_dir = self.data_dir / "quarantine"
        self._lock = FileLock(str(self.data_dir / ".lock"), timeout=lock_timeout_s)
        self._tlock = threading.RLock()
        self._files = TripFiles(self._trips_dir)
        self._drafts = Drafts(self.data_dir / "drafts")
        self._index = SummaryIndex(self._index_dir)
        self._tables = Tables(self.data_dir, self._quarantine, self._keep_copy)
        self._finalizer: Any = None  # in_memory(): removes the temporary folder with the store
        self._bases: tuple[Any, dict[str, str]] = (None, {})

    # -- opening ---------------------------------------------------------------------------
    @classmethod
    def open(
        cls,
        data_dir: Path | str | None = None,
        device_id: str | None = None,
        *,
        clock: Callable[[], datetime] | None = None,
        lock_timeout_s: float = 5.0,
    ) -> DeviceStore:
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
                atomic_write_bytes(root / "device.json", canonical_json_bytes({"device_id": remembered}))
            store.device_id = device_id or remembered
            store.device_name = store._read_device_file().get("name") or None
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

    def _read_device_file(self) -> dict[str, Any]:
        try:
            data = json.loads((self.data_dir / "device.json").read_bytes())
        except (OSError, ValueError):
            return {}
        return data if isinstance(data, dict) else {}

    def set_device_name(self, name: str) -> str:
        """Names this device (kept in device.json; stamped on every audit entry it writes, so
        conflicts and the audit show people a name, never a device id). 1 to 40 characters."""
        text = " ".join(str(name or "").split())
        if not 1 <= len(text) <= 40:
            raise InvalidRecord("Device name: write 1 to 40 characters, e.g. 'Tablet 2' or 'Lab desk'.")
        with self._locked():
            data = self._read_device_file()
            data.update(device_id=data.get("device_id") or self.device_id, name=text)
            try:
                atomic_write_bytes(self.data_dir / "device.json", canonical_json_bytes(data))
            except OSError as exc:
                raise StoreWriteError(
                    f"Could not write device.json ({exc.strerror or exc}); the device name is unchanged."
                ) from None
            self.device_name = text
        return text

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
        patterns = [(self._trips_dir, ".*.tmp"), (self._index_dir, ".*.tmp"), (self.data_dir / "drafts", ".*.tmp")]
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
                    f" and try again."
                ) from None
            try:
                yield
            finally:
                self._lock.release()

    # -- quarantine ------------------------------------------------------------------------
    def _quarantine(self, path: Path, reason: str) -> Path:
        return quarantine(self._quarantine_dir, f"{path.name}.{utc_stamp()}", reason, source=path)

    def _keep_copy(self, name: str, data: bytes, reason: str) -> Path:
        target = self._quarantine_dir / name
        if target.is_file() and target.with_name(target.name + ".reason.txt").is_file():
            return target  # the name carries the content's hash: this content is kept already
        return quarantine(self._quarantine_dir, name, reason, data=data, refresh=True)

    def quarantined(self) -> list[Path]:
        """Files moved aside because they could not be read (oldest first), by name."""
        return sorted(
            (p for p in self._quarantine_dir.glob("*") if not p.name.endswith(".reason.txt")),
            key=lambda p: (p.stat().st_mtime_ns, p.name),
        )

    # -- reading trips ---------------------------------------------------------------------
    def _trip_path(self, trip_id: str) -> Path:
        return self._files.path(trip_id)

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
            self._index.drop(path.stem)
            self._files.forget(path.stem)
        return CorruptFile(
            f"The trip file {path.name} could not be read ({reason}); it was moved to"
            f" {target} and the rest of the store keeps working.",
            target,
        )

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
                self._files.forget(trip_id)
                return None
            try:
                raw, doc = self._files.read(trip_id, file_bytes)
            except Unreadable as bad:
                err = self._corrupt(path, str(bad), file_bytes)
                if err is None:
                    continue
                raise err from None
            return raw, doc
        raise StoreError(f"The trip file {path.name} keeps changing while being read; try again.")

    def _read_trip_doc_raw(self, trip_id: str) -> dict[str, Any] | None:
        """The stored document as written (no migration), None when absent; quarantines junk."""
        got = self._read_trip_file(trip_id)
        return None if got is None else got[1]

    def _load(self, trip_id: str) -> tuple[Trip, dict[str, Any]]:
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
            hit = self._files.cached(trip_id)
            err = self._corrupt(path, reason, hit[0] if hit is not None else seen)
            if err is None:
                return self._load(trip_id)
            raise err from None
        return trip, raw

    def load_trip(self, trip_id: str) -> Trip:
        """The trip with that id (migrated from an older schema in memory if needed), with this
        device's drafts on its stops (core.store.drafts; they are not in the trip file).

        Raises TripNotFound, NewerSchemaError (file left untouched) or CorruptFile (moved to
        quarantine).
        """
        trip = self._load(trip_id)[0]
        return with_drafts(trip, self._drafts.read(trip.id))

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
                if not entry.name.endswith(".json") or not SAFE_ID.match(trip_id):
                    continue
                try:
                    st = entry.stat()
                except FileNotFoundError:
                    continue
                keys[trip_id] = (st.st_ino, st.st_mtime_ns, st.st_size)
        self._index.prune(keys)
        for trip_id, key in keys.items():
            summary = self._index.get(trip_id, key)
            if summary is None:
                try:
                    got = self._read_trip_file(trip_id)
                except CorruptFile:
                    continue
                if got is None:
                    continue
                summary = self._index.write(got[1], None, self._file_key(trip_id))
            out.append(summary)
        out.sort(key=lambda s: (s.started_at, s.id), reverse=True)
        return out

    def _file_key(self, trip_id: str) -> FileKey | None:
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

    # -- the one save path: every write names the revision it read ------------------------
    def _check_expected(self, trip_id: str, stored: dict[str, Any] | None, expected: int | None) -> None:
        """Raises StaleTrip unless the stored trip is at `expected` (None: no stored trip)."""
        found = None if stored is None else int(stored.get("revision", 0))
        if found == expected:
            return
        if expected is None:
            raise StaleTrip(
                f"Trip {trip_id} is already on this device (revision {found}); load it and"
                " make the change again, or import the file to merge it."
            )
        if found is None:
            raise StaleTrip(f"Trip {trip_id} is no longer on this device; nothing was saved.")
        raise StaleTrip(
            f"Trip {trip_id} was changed elsewhere (stored revision {found}, this copy"
            f" {expected}); reload it and make the change again."
        )

    def save_trip(self, trip: Trip, change: str, *, by: str | None = None, reason: str | None = None) -> Trip:
        """Saves a trip loaded from this store (or a new one): validate → derive → write, with an
        audit entry and revision + 1.

        The trip's own `revision` is the revision it was read at (0 for a new trip): a stored
        trip at another revision raises StaleTrip and nothing is written (reload, or use
        :meth:`update_trip`). `change` says what was done in a few words ("stop LK-02
        readings"); `by` and `reason` are recorded in the audit entry. Returns the trip as
        stored; a save whose content equals the stored trip writes nothing. Raises
        InvalidRecord (nothing written), StaleTrip, NewerSchemaError, StoreLocked.
        """
        checked = self._validated(trip)
        with self._locked():
            stored = self._stored_or_none(checked.id)
            if stored is None and checked.revision == 0:
                expected = None
            else:
                expected = checked.revision
            self._check_expected(checked.id, stored, expected)
            base = int(stored.get("revision", 0)) if stored is not None else checked.revision
            return self._commit(checked, stored, change, base, by=by, reason=reason)

    def put_document(self, doc: dict[str, Any], change: str, *, expected_revision: int | None) -> Trip:
        """Writes a trip document in place of the stored one, through the same save path.

        `expected_revision` is the stored revision the document was based on (None: the trip is
        expected not to be on this device yet); when the stored trip is at another revision,
        StaleTrip is raised and nothing is written — re-read, or hand the document to
        :meth:`merge_document`. The document is migrated, validated strictly and derived
        again; when its content equals the stored trip nothing is written. Otherwise it is
        written with revision max(stored, incoming) + 1 and an audit entry. Raises
        InvalidRecord, NewerSchemaError (nothing written), StaleTrip, StoreLocked.
        """
        if not isinstance(doc, dict):
            raise InvalidRecord("A trip document must be a JSON object.")
        checked = self._validate_doc(migrate(doc))
        with self._locked():
            stored = self._stored_or_none(checked.id)
            self._check_expected(checked.id, stored, expected_revision)
            base = max(checked.revision, int(stored.get("revision", 0)) if stored is not None else 0)
            return self._commit(checked, stored, change, base, foreign=True, review_guard=False)

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
                    f" expected {expected_revision}); read it again and merge."
                )
            if stored is not None:
                ids = {e.get("id") for e in doc.get("audit") or [] if isinstance(e, dict)}
                if not all(isinstance(e, dict) and e.get("id") in ids for e in stored.get("audit") or []):
                    return None
                if canonical_json_bytes(stored) == doc_bytes:
                    return checked
            self._write_trip_bytes(json.loads(doc_bytes), doc_bytes, exists=stored is not None)
        return checked

    def _write_trip_bytes(self, new_doc: dict[str, Any], doc_bytes: bytes, *, exists: bool = True) -> None:
        """Writes one trip document (its canonical bytes) and its summary. Lock held."""
        path = self._trip_path(new_doc["id"])
        try:
            self._files.write(new_doc, doc_bytes, exists=exists)
        except OSError as exc:
            self._files.forget(new_doc["id"])
            raise StoreWriteError(
                f"Could not write {path.name} ({exc.strerror or exc}); the stored trip"
                " is unchanged — free space or check the storage, then save again."
            ) from None
        self._index.write(new_doc, "sha256:" + hashlib.sha256(doc_bytes).hexdigest(), self._file_key(new_doc["id"]))
        self._note_change(new_doc["id"])

    # -- the change feed -------------------------------------------------------------------
    def _note_change(self, trip_id: str) -> None:
        """Appends the trip's id to ``changes.log`` after its file is written (lock held).

        A feed for readers that want "what was saved since I last looked" without listing every
        trip (the office archive). Not fsynced and best effort: a line lost to a crash is found by
        the reader's own full check, which it runs now and then; so are lines of a rotated file.
        """
        path = self.data_dir / CHANGES_FILE
        try:
            if path.exists() and path.stat().st_size > CHANGES_ROTATE_BYTES:
                os.replace(path, self.data_dir / (CHANGES_FILE + ".1"))
            with open(path, "ab") as fh:
                fh.write(trip_id.encode("utf-8") + b"\n")
        except OSError:
            pass

    def changes_since(self, mark: tuple[int, int] | None) -> tuple[list[str] | None, tuple[int, int]]:
        """(ids of trips saved since `mark`, the new mark); the ids are None when `mark` is None or
        no longer fits the feed (rotated, removed): the caller then checks every trip. Take the
        mark before reading the trips it covers."""
        path = self.data_dir / CHANGES_FILE
        try:
            with open(path, "rb") as fh:
                st = os.fstat(fh.fileno())
                if mark is None or mark[0] != st.st_ino or not 0 <= mark[1] <= st.st_size:
                    return None, (st.st_ino, st.st_size)
                fh.seek(mark[1])
                data = fh.read(st.st_size - mark[1])
        except FileNotFoundError:
            return None, (0, 0)
        end = data.rfind(b"\n") + 1  # complete lines only
        ids = sorted({line.decode("utf-8", "replace") for line in data[:end].splitlines() if line})
        return ids, (st.st_ino, mark[1] + end)

    def merge_document(self, doc: dict[str, Any], change: str, *, base: dict[str, Any] | None = None) -> MergeOutcome:
        """Merges a version of a trip from elsewhere (an imported file, a hub) into the stored one.

        Under the store's lock the stored trip is read again and compared by history (the ids
        of the audit entries each save appends): a version the stored trip already contains
        (older or equal) changes nothing; one that contains the stored trip is taken as is; a
        diverged one is merged three ways through core.records.merge.merge_trips, with the
        common ancestor chosen from `base` (the stored version the caller built `doc` from,
        when it has one) as sync does — two ways when none is known. Lab results, calibrations
        and custody records the stored trip holds are never removed. Raises InvalidRecord,
        NewerSchemaError (nothing written), StoreLocked.
        """
        if not isinstance(doc, dict):
            raise InvalidRecord("A trip document must be a JSON object.")
        checked = self._validate_doc(migrate(doc))
        incoming = checked.to_document()
        with self._locked():
            stored = self._stored_or_none(checked.id)
            if stored is None:
                return MergeOutcome(
                    self._commit(checked, None, change, checked.revision, foreign=True, review_guard=False), "new"
                )
            ours, theirs = history(stored), history(incoming)
            if theirs and theirs <= ours:
                return MergeOutcome(Trip.from_document(stored), "unchanged")
            conflicts: list[dict[str, Any]] = []
            if theirs and ours < theirs:
                merged, kind = incoming, "fast-forward"
            else:
                candidates = [migrate(base)] if isinstance(base, dict) else []
                ancestor = common_ancestor(candidates, stored, incoming) if theirs else None
                result = merge_trips(ancestor, stored, incoming)
                merged, kind, conflicts = result.doc, "merged", result.new_conflicts
            merged = retain(stored, merged)
            trip = self._validate_doc(merged)
            revision = max(int(stored.get("revision", 0)), checked.revision)
            saved = self._commit(trip, stored, change, revision, foreign=True, review_guard=False)
            if saved.revision == int(stored.get("revision", 0)):
                kind = "unchanged"
            return MergeOutcome(saved, kind, conflicts)

    def update_trip(
        self,
        trip_id: str,
        change: str | Callable[[], str],
        fn: Callable[[Trip], Trip | None],
        *,
        by: str | None = None,
        reason: str | None = None,
    ) -> Trip:
        """Read–modify–write of one trip under the store's lock (lab results, corrections,
        settlements): `fn` gets the stored trip and returns the changed one (None: no change).
        `change` may be a callable, asked after `fn` (a sentence that names what `fn` computed).

        `fn` runs while the lock is held, so no other writer can come between the read and the
        write: keep it short and free of I/O. An exception from `fn` leaves the trip unchanged.
        Raises TripNotFound, InvalidRecord, NewerSchemaError, StoreLocked.
        """
        with self._locked():
            trip, stored = self._load(trip_id)
            trip = with_drafts(trip, self._drafts.read(trip_id))
            changed = fn(trip)
            if changed is None:
                return trip
            checked = self._validated(changed)
            if checked.id != trip.id:
                raise InvalidRecord("A trip update cannot change the trip's id.")
            text = change() if callable(change) else change
            return self._commit(checked, _migrated(stored), text, int(stored.get("revision", 0)), by=by, reason=reason)

    def save_stop(self, trip_id: str, stop: Stop, change: str | None = None) -> Trip:
        """Adds or replaces (by id) one stop of a stored trip, through the same save path.

        The stop is validated strictly, the rest of the trip as stored; the stored revision is
        the base (this is the call for autosaving one stop: it cannot be stale; built on
        :meth:`update_trip`).
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
            raise InvalidRecord(
                one_line(probs) if probs else "The stop holds a value JSON cannot carry.", probs
            ) from None

        def put_stop(trip: Trip) -> Trip:
            stops = list(trip.stops)
            for i, s in enumerate(stops):
                if s.id == new_stop.id:
                    # Fields a newer build stored on this stop survive a form that never knew them.
                    # (Not a draft: the form says whether it still has one.)
                    kept = {
                        k: v
                        for k, v in (s.model_extra or {}).items()
                        if k not in (new_stop.model_extra or {}) and k not in LOCAL_STOP_KEYS
                    }
                    stops[i] = new_stop.model_copy(update=kept) if kept else new_stop
                    break
            else:
                stops.append(new_stop)
            return trip.model_copy(update={"stops": stops})

        return self.update_trip(trip_id, change or f"stop at {stop.site_id} saved", put_stop)

    def _stored_or_none(self, trip_id: str) -> dict[str, Any] | None:
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

    def _commit(
        self,
        trip: Trip,
        stored: dict[str, Any] | None,
        change: str,
        base_revision: int,
        *,
        by: str | None = None,
        reason: str | None = None,
        foreign: bool = False,
        review_guard: bool = True,
    ) -> Trip:
        """The funnel: derive, compare, audit, write the trip file, then its summary. Lock held.

        A stop's local keys (drafts) are kept in this device's drafts, never in the trip file.
        `review_guard` refuses an edit of an approved trip that is not a correction
        (core.rules.review); documents from elsewhere carry the office's own steps and are
        merged, not refused."""
        trip, drafts = split_drafts(trip)
        if foreign:  # a version from elsewhere knows nothing of this device's drafts: keep them
            drafts = {**self._drafts.read(trip.id), **drafts}
        saved = self._commit_clean(trip, stored, change, base_revision, by=by, reason=reason, review_guard=review_guard)
        try:
            self._drafts.write(trip.id, drafts)
        except OSError as exc:
            raise StoreWriteError(
                f"The trip was saved, but its unfinished entries could not be kept"
                f" ({exc.strerror or exc}); free space and type them again."
            ) from None
        return with_drafts(saved, drafts)

    def _commit_clean(
        self,
        trip: Trip,
        stored: dict[str, Any] | None,
        change: str,
        base_revision: int,
        *,
        by: str | None = None,
        reason: str | None = None,
        review_guard: bool = True,
    ) -> Trip:
        from core.rules.qc import derive
        from core.rules.review import ReviewRefused, check_change

        sites = self.sites_by_id()
        settings = self.settings()
        bases_key = self._tables.basis_key()
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
            new_doc["audit"] = merge_audit(stored.get("audit") or [], incoming_audit)
        if stored is not None and _content(stored) == _content(new_doc):
            return Trip.from_document(stored)
        if review_guard:
            try:
                check_change(stored, new_doc)
            except ReviewRefused as exc:
                raise ApprovedTrip(str(exc)) from None
        now = self._clock().astimezone(UTC)
        revision = base_revision + 1
        changes = diff_changes(stored, new_doc) if stored is not None else []
        entry = AuditEntry(
            at=now,
            device_id=self.device_id,
            device_name=self.device_name,
            change=str(change)[:400] or "saved",
            revision=revision,
            fields=[c["path"] for c in changes] if stored is not None else ["(new trip)"],
            changes=[AuditChange.model_validate(c) for c in changes],
            by=(by or None) and str(by)[:80],
            reason=(reason or None) and str(reason)[:400],
        )
        entry_doc = entry.model_dump(mode="json")
        same_audit = new_doc.get("audit") == incoming_audit
        new_doc["audit"] = list(new_doc.get("audit") or []) + [entry_doc]
        new_doc["revision"] = revision
        new_doc["updated_at"] = entry_doc["at"]
        doc_bytes = canonical_json_bytes(new_doc)
        self._write_trip_bytes(new_doc, doc_bytes, exists=stored is not None)
        if not same_audit:
            return Trip.model_validate_json(doc_bytes)
        # `derived` was validated from JSON in this call and shares nothing with the caller.
        return derived.model_copy(
            update={
                "device_id": device_id,
                "schema_version": SCHEMA_VERSION,
                "revision": revision,
                "updated_at": entry.at,
                "audit": list(derived.audit) + [entry],
            }
        )

    # -- sites and settings ----------------------------------------------------------------
    def sites_by_id(self) -> dict[str, Site]:
        return self._tables.sites_by_id()

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
        with self._locked():
            stored = {sid: site.model_dump(mode="json") for sid, site in self._tables.sites_by_id().items()}
            checked = [self._stamped(site, stored.get(site.id)) for site in checked]
            self._tables.write_sites(checked)
        return checked

    def _stamped(self, record: Any, stored: dict[str, Any] | None) -> Any:
        """`record` (a Site or the settings) with ``updated_at`` set to now when its content
        changed and the caller kept the stored stamp (or gave none); a stamp the caller set
        otherwise (sync bringing another device's newer entry) is kept as given."""
        stored_at = None if stored is None else stored.get("updated_at")
        given = record.model_dump(mode="json")
        if given.get("updated_at") not in (None, stored_at):
            return record
        same = stored is not None and (
            {k: v for k, v in given.items() if k != "updated_at"}
            == {k: v for k, v in stored.items() if k != "updated_at"}
        )
        if same:
            return (
                record
                if given.get("updated_at") == stored_at
                else type(record).model_validate_json(canonical_json_bytes({**given, "updated_at": stored_at}))
            )
        return record.model_copy(update={"updated_at": self._clock().astimezone(UTC)})

    def settings(self) -> ProgramSettings:
        """The program settings (defaults until saved)."""
        return self._tables.settings()

    def left_out(self) -> dict[str, list[str]]:
        """Parts of the stored settings and sites that the last read left out as not valid (by
        record: "settings", "site LK-03"), each record kept whole in ``quarantine/``."""
        return {k: list(v) for k, v in self._tables.left_out.items()}

    def save_settings(self, s: ProgramSettings) -> ProgramSettings:
        """Replaces the program settings."""
        return self.update_settings(lambda _current: s)

    def update_settings(self, apply: Callable[[ProgramSettings], ProgramSettings]) -> ProgramSettings:
        """The read–modify–write of the program settings under the store's lock: `apply` gets the
        settings as stored now and returns the new ones (so a change made meanwhile by a pull or
        another command is not overwritten with an older copy)."""
        with self._locked():
            current = self._tables.settings()
            try:
                checked = ProgramSettings.model_validate_json(
                    canonical_json_bytes(apply(current).model_dump(mode="json"))
                )
            except ValidationError as exc:
                probs = problems_from_validation(exc)
                raise InvalidRecord(one_line(probs), probs) from None
            checked = self._stamped(checked, current.model_dump(mode="json"))
            self._tables.write_settings(checked)
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
