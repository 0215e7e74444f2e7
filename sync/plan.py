"""Pure planning: which action each trip needs, from what the device holds and what the hub holds.

``plan(local, remote)`` decides a push; ``plan_pull(local, remote)`` a pull. Both take plain
mappings (trip id → entry) and return actions; they do no I/O and are tested on dicts. The shell
(`sync.engine`) builds the manifests, carries the actions out through a target, and records the
result in the outbox. Sync never deletes at the hub, so there is no delete action.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from enum import Enum

from sync.layout import revision_name

__all__ = ["Action", "LocalEntry", "RemoteEntry", "PlannedAction", "plan", "plan_pull"]


class Action(str, Enum):
    """What one trip needs."""

    SKIP = "skip"  # push: the hub already holds this exact revision; pull: nothing new
    CREATE = "create"  # the hub holds nothing of this trip: make its collection, write the revision
    UPDATE = "update"  # the hub holds only versions this device has seen: write the new revision
    MERGE = "merge"  # the hub holds versions this device has not seen: fetch, merge, then write
    FETCH = "fetch"  # pull: the hub holds versions this device has not seen: fetch and merge in


@dataclass(frozen=True)
class LocalEntry:
    """One trip on the device, with what the outbox knows of it for this hub."""

    trip_id: str
    revision: int
    content_hash: str
    seen: frozenset[str] = frozenset()  # hub revision files already contained in the device copy

    @property
    def name(self) -> str:
        return revision_name(self.revision, self.content_hash)


@dataclass(frozen=True)
class RemoteEntry:
    """One trip at the hub: the names of its revision files (empty: collection exists, no files)."""

    trip_id: str
    names: frozenset[str] = frozenset()


@dataclass(frozen=True)
class PlannedAction:
    action: Action
    trip_id: str
    name: str = ""  # hub file name of the device's revision (push)
    unseen: tuple[str, ...] = field(default=())  # hub files to fetch and merge, oldest first


def _sorted_names(names) -> tuple[str, ...]:
    return tuple(sorted(names))  # rNNNNNN- prefix sorts by revision


def plan(local: Mapping[str, LocalEntry], remote: Mapping[str, RemoteEntry]) -> list[PlannedAction]:
    """Push plan, one action per local trip, in trip-id order.

    A trip missing from `remote` is taken as absent at the hub (CREATE). When `remote` comes from
    the outbox rather than a fresh listing, CREATE/UPDATE/MERGE are provisional: the shell lists
    that trip at the hub and plans it again before writing.
    """
    out: list[PlannedAction] = []
    for trip_id in sorted(local):
        entry = local[trip_id]
        name = entry.name
        hub = remote.get(trip_id)
        if hub is None:
            out.append(PlannedAction(Action.CREATE, trip_id, name))
            continue
        if name in hub.names:
            out.append(PlannedAction(Action.SKIP, trip_id, name))
            continue
        unseen = hub.names - entry.seen - {name}
        if unseen:
            out.append(PlannedAction(Action.MERGE, trip_id, name, _sorted_names(unseen)))
        else:
            out.append(PlannedAction(Action.UPDATE, trip_id, name))
    return out


def plan_pull(
    local: Mapping[str, LocalEntry],
    remote: Mapping[str, RemoteEntry],
    known: Mapping[str, frozenset[str]] | None = None,
) -> list[PlannedAction]:
    """Pull plan, one action per trip at the hub, in trip-id order: FETCH the revision files the
    device has not seen (or all of them for a trip the device does not hold), else SKIP.
    `known` lists hub files already dealt with for trips the device does not hold (found bad)."""
    out: list[PlannedAction] = []
    known = known or {}
    for trip_id in sorted(remote):
        names = remote[trip_id].names
        entry = local.get(trip_id)
        if entry is None:
            unseen: set[str] | frozenset[str] = set(names) - known.get(trip_id, frozenset())
        else:
            unseen = names - entry.seen - {entry.name}
        if unseen:
            out.append(PlannedAction(Action.FETCH, trip_id, entry.name if entry else "", _sorted_names(unseen)))
        else:
            out.append(PlannedAction(Action.SKIP, trip_id, entry.name if entry else ""))
    return out
