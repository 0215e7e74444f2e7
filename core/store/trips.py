"""The trip files: one small TinyDB file per trip (table "trip", document 1 = the trip document).

Reads compare the file's bytes with the last version this process read or wrote and parse only
a changed file; writes go through TinyDB's own API on
:class:`core.store.storage.AtomicJSONStorage` (temporary file, fsync, ``os.replace``, fsync of
the folder), so a reader or a crash sees the old file or the new one, never a part.
"""

from __future__ import annotations

import re
from collections.abc import Callable, MutableMapping
from pathlib import Path
from typing import Any

from tinydb import TinyDB
from tinydb.table import Document

from core.store.atomic import canonical_json_bytes
from core.store.errors import TripNotFound
from core.store.storage import AtomicJSONStorage, SnapshotStorage

__all__ = ["SAFE_ID", "TABLE", "TripFiles", "Unreadable"]

SAFE_ID = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$")
TABLE = "trip"
_DOC_ID = 1


class Unreadable(Exception):
    """A trip file that does not parse (the reason is the message)."""


def _replace_with(new: dict[str, Any]) -> Callable[[MutableMapping[Any, Any]], None]:
    def replace(doc: MutableMapping[Any, Any]) -> None:
        doc.clear()
        doc.update(new)

    return replace


class TripFiles:
    """The ``trips/`` folder with a small cache of (file bytes, document bytes, document) by id."""

    def __init__(self, folder: Path):
        self.folder = Path(folder)
        # by trip id: (file bytes, document bytes, document, the file's whole table map)
        self._cache: dict[str, tuple[bytes, bytes, dict[str, Any], dict[str, Any]]] = {}

    def path(self, trip_id: str) -> Path:
        if not isinstance(trip_id, str) or not SAFE_ID.match(trip_id):
            raise TripNotFound(f"No trip with id {trip_id!r} on this device (ids are letters, digits, '-', '_', '.').")
        return self.folder / f"{trip_id}.json"

    def cached(self, trip_id: str) -> tuple[bytes, bytes, dict[str, Any], dict[str, Any]] | None:
        return self._cache.get(trip_id)

    def forget(self, trip_id: str) -> None:
        self._cache.pop(trip_id, None)

    @staticmethod
    def parse(trip_id: str, file_bytes: bytes) -> tuple[bytes, dict[str, Any], dict[str, Any]]:
        """(the document's canonical bytes, the document, the file's table map) from a trip
        file's bytes, read through TinyDB."""
        try:
            db = TinyDB(file_bytes, storage=SnapshotStorage)
            found = db.table(TABLE).get(doc_id=_DOC_ID)
            tables = db.storage.read() or {}
        except ValueError as exc:
            raise Unreadable(str(exc)) from None
        except (AttributeError, TypeError):
            found = None
        doc = dict(found) if isinstance(found, dict) else None
        if doc is None:
            raise Unreadable("no trip document inside")
        if doc.get("id") != trip_id:
            raise Unreadable(f"the id inside is {doc.get('id')!r}")
        try:
            raw = canonical_json_bytes(doc)
        except ValueError as exc:
            raise Unreadable(str(exc)) from None
        return raw, doc, tables

    def read(self, trip_id: str, file_bytes: bytes) -> tuple[bytes, dict[str, Any]]:
        """The parsed document of these file bytes (from the cache when they are the same)."""
        hit = self._cache.get(trip_id)
        if hit is not None and hit[0] == file_bytes:
            return hit[1], hit[2]
        raw, doc, tables = self.parse(trip_id, file_bytes)
        if len(self._cache) > 64:
            self._cache.clear()
        self._cache[trip_id] = (file_bytes, raw, doc, tables)
        return raw, doc

    def write(self, doc: dict[str, Any], doc_bytes: bytes, *, exists: bool) -> bytes:
        """Writes the trip document as document 1 of table "trip"; returns the file's bytes.

        The caller holds the store's lock and has just read the file, so TinyDB is handed that
        reading (a copy of the cached table map) instead of parsing the file a second time.
        Raises OSError when the disk refuses (the stored file is then unchanged).
        """
        path = self.path(doc["id"])
        hit = self._cache.get(doc["id"]) if exists else None
        current = None
        if hit is not None:
            current = {name: {k: dict(v) for k, v in table.items()} for name, table in hit[3].items()}
        db = TinyDB(path, storage=AtomicJSONStorage, current=current)
        table = db.table(TABLE)
        if not exists or not table.update(_replace_with(doc), doc_ids=[_DOC_ID]):
            table.insert(Document(doc, doc_id=_DOC_ID))
        storage = db.storage
        assert isinstance(storage, AtomicJSONStorage)
        file_bytes, tables = storage.written, storage.written_data
        if file_bytes is None or tables is None:  # pragma: no cover - TinyDB always writes through it
            raise OSError("the trip file was not written")
        self._cache[doc["id"]] = (file_bytes, doc_bytes, doc, tables)
        return file_bytes
