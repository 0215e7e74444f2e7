"""Drafts: what a person typed that a form could not accept yet, kept on this device only.

One small TinyDB file per trip (``drafts/<trip>.json``, table "drafts", document 1 = stop id →
the stop's local keys, :data:`core.records.models.LOCAL_STOP_KEYS`). The store moves these keys
out of every trip it saves and puts them back on the trips it loads, so a draft survives a save
and a restart but is never written into the trip file, and so never reaches a hub or a merge.
"""

from __future__ import annotations

from collections.abc import MutableMapping
from pathlib import Path
from typing import Any

from tinydb import TinyDB
from tinydb.table import Document

from core.records.models import LOCAL_STOP_KEYS, Trip
from core.store.storage import AtomicJSONStorage

__all__ = ["Drafts", "split_drafts", "with_drafts"]

_TABLE = "drafts"


def split_drafts(trip: Trip) -> tuple[Trip, dict[str, dict[str, Any]]]:
    """(the trip without local keys on its stops, stop id → those keys)."""
    drafts: dict[str, dict[str, Any]] = {}
    stops = []
    changed = False
    for stop in trip.stops:
        extra = stop.model_extra or {}
        local = {k: extra[k] for k in LOCAL_STOP_KEYS if k in extra}
        if local:
            drafts[stop.id] = local
            clean = stop.model_copy()
            for k in local:
                clean.__pydantic_extra__.pop(k, None)  # type: ignore[union-attr]
            stops.append(clean)
            changed = True
        else:
            stops.append(stop)
    return (trip.model_copy(update={"stops": stops}) if changed else trip), drafts


def with_drafts(trip: Trip, drafts: dict[str, dict[str, Any]]) -> Trip:
    """The trip with each stop's local keys put back (stops no longer in the trip are ignored)."""
    if not drafts:
        return trip
    stops = [s.model_copy(update=drafts[s.id]) if s.id in drafts else s for s in trip.stops]
    return trip.model_copy(update={"stops": stops})


class Drafts:
    """The ``drafts/`` folder."""

    def __init__(self, folder: Path):
        self.folder = Path(folder)

    def _path(self, trip_id: str) -> Path:
        return self.folder / f"{trip_id}.json"

    def read(self, trip_id: str) -> dict[str, dict[str, Any]]:
        path = self._path(trip_id)
        if not path.exists():
            return {}
        try:
            doc = TinyDB(path, storage=AtomicJSONStorage).table(_TABLE).get(doc_id=1)
        except (OSError, ValueError):
            return {}  # a draft is a convenience: an unreadable one is dropped
        return {k: dict(v) for k, v in dict(doc or {}).items() if isinstance(v, dict)}

    def write(self, trip_id: str, drafts: dict[str, dict[str, Any]]) -> None:
        """Replaces the trip's drafts (none: the file is removed). Lock held by the caller."""
        path = self._path(trip_id)
        if not drafts:
            path.unlink(missing_ok=True)
            return
        if self.read(trip_id) == drafts:
            return

        def replace(doc: MutableMapping[Any, Any]) -> None:
            doc.clear()
            doc.update(drafts)

        table = TinyDB(path, storage=AtomicJSONStorage).table(_TABLE)
        if not table.update(replace, doc_ids=[1]):
            table.insert(Document(dict(drafts), doc_id=1))
