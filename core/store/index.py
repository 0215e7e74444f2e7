"""The summary index: one small file per trip with what the trip list shows, a checked cache.

Each entry names the (inode, mtime, size) of the trip file it was made from; a listing checks
that with one ``stat`` per trip and rebuilds an entry that is missing, unreadable or outdated.
Entries are replaced atomically but not fsynced: a summary lost or torn by a power cut is rebuilt.
"""

from __future__ import annotations

import json
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

from core.records.models import SCHEMA_VERSION
from core.rules.review import review_state
from core.store.atomic import atomic_write_bytes, canonical_json_bytes, content_hash

__all__ = ["FileKey", "SummaryIndex", "TripSummary", "summary_of"]

FileKey = tuple[int, int, int]


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


def summary_of(doc: dict[str, Any], digest: str | None = None) -> TripSummary:
    """The summary of a stored trip document (`digest`: its content hash when already known)."""
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
        id=doc["id"],
        program=doc.get("program", ""),
        crew=list(doc.get("crew") or []),
        started_at=doc.get("started_at", ""),
        ended_at=doc.get("ended_at"),
        revision=int(doc.get("revision", 0)),
        status=status,
        stop_count=len(stops),
        updated_at=doc.get("updated_at"),
        content_hash=digest or content_hash(doc),
        schema_version=int(doc.get("schema_version", 0)),
        open_conflicts=len(conflicts),
        bottle_labels=labels,
        review_state=review_state(doc),
    )


class SummaryIndex:
    """The ``index/`` folder, with the summaries this process has read or written in memory."""

    def __init__(self, folder: Path):
        self.folder = Path(folder)
        # by trip id: (the trip file's key it belongs to, the summary)
        self._memo: dict[str, tuple[FileKey, TripSummary]] = {}

    def write(self, doc: dict[str, Any], digest: str | None, key: FileKey | None) -> TripSummary:
        """Writes a trip's summary (atomically, without fsync; a failed write is rebuilt later)."""
        summary = summary_of(doc, digest)
        if key is not None:
            self._memo[doc["id"]] = (tuple(key), summary)  # type: ignore[assignment]
        data = canonical_json_bytes({"summary": summary.to_dict(), "file": list(key) if key else None})
        try:
            atomic_write_bytes(self.folder / f"{doc['id']}.json", data, durable=False)
        except OSError:
            pass  # the index is a checked cache: a missing entry is rebuilt on the next listing
        return summary

    def get(self, trip_id: str, key: FileKey) -> TripSummary | None:
        """The summary of the trip file with `key`, or None when none matches (rebuild it)."""
        memo = self._memo.get(trip_id)
        if memo is not None and memo[0] == key:
            return memo[1]
        try:
            data = json.loads((self.folder / f"{trip_id}.json").read_bytes())
            if data.get("file") == list(key):
                summary = TripSummary(**data["summary"])
                self._memo[trip_id] = (key, summary)
                return summary
        except (OSError, ValueError, TypeError, KeyError, AttributeError):
            pass
        return None

    def drop(self, trip_id: str) -> None:
        (self.folder / f"{trip_id}.json").unlink(missing_ok=True)
        self._memo.pop(trip_id, None)

    def prune(self, keep: set[str] | dict[str, Any]) -> None:
        """Removes the entries of trips whose file is gone (quarantined)."""
        import os

        with os.scandir(self.folder) as entries:
            for entry in entries:
                if entry.name.endswith(".json") and entry.name[:-5] not in keep:
                    Path(entry.path).unlink(missing_ok=True)
