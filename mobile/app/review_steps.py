"""The open trip's conflicts and the office's review, as the app handles them: settle, returned, resubmit (no kivy).

Functions of the app's controller (mobile.app.controller.AppController), which forwards to them: they
read its open trip and the trip as last stored, write through the store's one save path
(`update_trip`) and have the controller adopt what was stored.
"""

from __future__ import annotations

from datetime import timezone
from typing import Any

from mobile.app.theme import severity_mark

__all__ = ["conflicts", "conflicts_of", "conflict_lines", "settler", "settle_conflict", "returned_reasons", "resubmit"]


def conflicts_of(ctl: Any, trip: Any) -> list[Any]:
    """A stored trip's open conflicts as people read them, seen from this device."""
    from core.rules.conflicts import list_conflicts

    return list_conflicts(trip, this_device=ctl.store.device_id)


def conflicts(ctl: Any) -> list[Any]:
    """The open trip's open conflicts as people read them (core.rules.conflicts.ConflictView):
    site and stop, the field's label, each value with its unit, the device's name and when."""
    from core.rules.conflicts import list_conflicts

    if ctl.trip is None:
        return []
    saved = ctl._saved.get(ctl.trip.id)
    if saved is None:
        return []
    return list_conflicts(saved, this_device=ctl.store.device_id)


def conflict_lines(ctl: Any) -> list[str]:
    """The open conflicts, one line each (the End screen's list of what needs attention)."""
    sym, _ = severity_mark("warning")
    return [f"{sym} CONFLICT: {v.message} Tap the value to keep above." for v in ctl.conflicts()]


def settler(ctl: Any) -> str:
    """Who settles a conflict on this tablet: the device's name, else the trip's crew."""
    name = (getattr(ctl.store, "device_name", None) or "").strip()
    if not name and ctl.trip is not None and ctl.trip.crew.strip():
        name = f"crew {ctl.trip.crew.strip()}"
    return (name or "this tablet")[:80]


def settle_conflict(ctl: Any, conflict_id: str, keep: int) -> str | None:
    """Settles one open conflict of the open trip by keeping its `keep`-th value (1, 2, …),
    recorded with who and when; returns why not in one sentence, or None. The form is then
    reloaded from the store, so the next save carries the kept value."""
    from core.rules.conflicts import ConflictError, settle
    from core.store import StoreError

    if ctl.trip is None:
        return "No trip is open."
    ctl.flush()  # what was typed is in the store before it is read back
    by = settler(ctl)
    at = ctl.now().astimezone(timezone.utc)
    said: dict[str, Any] = {}

    def apply(trip: Any) -> Any:
        views = {v.id: v for v in conflicts_of(ctl, trip)}
        said["view"] = views.get(conflict_id)
        return settle(trip, conflict_id, keep=keep, by=by, at=at)

    def change() -> str:
        view = said.get("view")
        return f"conflict settled (kept value {keep}): " + (view.message if view else "a conflict")

    try:
        saved = ctl.store.update_trip(ctl.trip.id, change, apply, by=by)
    except ConflictError as exc:
        return f"Not settled: {exc}."
    except StoreError as exc:
        return f"Not settled, nothing was saved: {exc}"
    ctl._adopt_stored(saved)
    return None


def returned_reasons(ctl: Any) -> str | None:
    """Why the office returned the open trip (a sentence), or None when it is not returned."""
    from core.rules.review import describe, review_state

    saved = ctl._saved.get(ctl.trip.id) if ctl.trip is not None else None
    if saved is None or review_state(saved) != "returned":
        return None
    return describe(saved)


def resubmit(ctl: Any) -> str | None:
    """Hands a trip the office returned back to it (a 'resubmitted' review step, after what was
    typed is saved); returns why not in one sentence, or None when it is saved."""
    from core.records.models import ReviewEvent
    from core.rules.review import ReviewRefused, new_event
    from core.store import StoreError

    if ctl.trip is None:
        return "No trip is open."
    ctl.flush()
    by = settler(ctl)
    at = ctl.now().astimezone(timezone.utc)

    def apply(trip: Any) -> Any:
        event = ReviewEvent.model_validate(new_event(trip, "resubmitted", by=by, at=at), strict=False)
        return trip.model_copy(update={"review_events": [*trip.review_events, event]})

    try:
        saved = ctl.store.update_trip(ctl.trip.id, f"review: resubmitted by {by}", apply, by=by)
    except ReviewRefused as exc:
        return f"Not handed back: {exc}"
    except StoreError as exc:
        return f"Not handed back, nothing was saved: {exc}"
    ctl._adopt_stored(saved)
    return None
