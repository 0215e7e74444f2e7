"""The office's review of a trip: its states, the steps between them, and the rule that an approved
trip changes only through a correction with a reason.

Pure: documents (or Trips) and a time in, new events out; no disk, no clock.

States::

    in progress ──(crew ends the trip)──▶ ended ──review──▶ reviewed ──approve──▶ approved
                                           │ ▲                 │                    │
                                     return│ │resubmit   return│          correct (reason)
                                           ▼ │                 ▼                    │
                                          returned ◀───────────┘      reviewed ◀────┘

The state is never stored: it follows from ``ended_at`` and the trip's ``review_events`` (each one
who, when, a comment and, for a return, the reasons). Events are appended with their own ids, so
two offices' steps merge like any other list element (``sync.merge``); the latest step by time
(then id) decides the state.
"""

from __future__ import annotations

from collections.abc import Iterable
from datetime import datetime, timezone
from typing import Any

from core.records.models import BOOKKEEPING, LOG, keys_by_role

__all__ = [
    "STATES",
    "ACTIONS",
    "review_state",
    "latest_event",
    "open_reasons",
    "ReviewRefused",
    "describe",
    "new_event",
    "check_change",
    "approved_version",
    "REVIEW_KEY",
    "with_correction",
]

#: Every state a trip can be in, in workflow order.
STATES = ("in progress", "ended", "reviewed", "approved", "returned")
#: Steps a person takes, and the state each leads to.
ACTIONS = {
    "reviewed": "reviewed",
    "approved": "approved",
    "returned": "returned",
    "corrected": "reviewed",
    "resubmitted": "ended",
}
#: The trip field holding the events.
REVIEW_KEY = "review_events"
#: From which states each step may be taken.
_ALLOWED_FROM = {
    "reviewed": ("ended", "reviewed"),
    "approved": ("ended", "reviewed"),
    "returned": ("ended", "reviewed"),
    "resubmitted": ("returned",),
    "corrected": ("approved",),
}
#: Keys that may change on an approved trip without a correction (bookkeeping and the review itself).
#: (The store's bookkeeping and log roles as declared on the models, the conflicts list a
#: settlement changes, and the review's own events.)
_FREE_KEYS = keys_by_role(BOOKKEEPING, LOG) | {"conflicts", REVIEW_KEY}


class ReviewRefused(ValueError):
    """A step that the trip's state does not allow, or an edit of an approved trip; one sentence."""


def _get(obj: Any, name: str, default: Any = None) -> Any:
    return obj.get(name, default) if isinstance(obj, dict) else getattr(obj, name, default)


def _events(trip: Any) -> list[Any]:
    return list(_get(trip, REVIEW_KEY) or [])


def _key(ev: Any) -> tuple[str, str]:
    at = _get(ev, "at")
    text = at.isoformat() if isinstance(at, datetime) else str(at or "")
    try:
        # compare instants, not texts in different zones
        text = datetime.fromisoformat(text).astimezone(timezone.utc).isoformat() if text else text
    except ValueError:
        pass
    return (text, str(_get(ev, "id", "")))


def latest_event(trip: Any) -> Any | None:
    """The step that decides the state: the latest by time, then id (the same on every device)."""
    evs = _events(trip)
    return max(evs, key=_key) if evs else None


def review_state(trip: Any) -> str:
    """One of `STATES` for a Trip or a trip document."""
    if not _get(trip, "ended_at"):
        return "in progress"
    ev = latest_event(trip)
    if ev is None:
        return "ended"
    return ACTIONS.get(str(_get(ev, "action")), "ended")


def open_reasons(trip: Any) -> list[str]:
    """The reasons of the return a returned trip is waiting on (empty otherwise)."""
    ev = latest_event(trip)
    if ev is None or _get(ev, "action") != "returned" or not _get(trip, "ended_at"):
        return []
    return list(_get(ev, "reasons") or [])


def describe(trip: Any) -> str:
    """The review state in words for reports and lists, e.g. "approved by D.M. on 2026-07-02"."""
    state = review_state(trip)
    ev = latest_event(trip)
    if ev is None or state in ("in progress",):
        return {"in progress": "in progress (not ended by the crew)", "ended": "ended, not reviewed yet"}[state]
    at = _get(ev, "at")
    day = (at.isoformat() if isinstance(at, datetime) else str(at or ""))[:10]
    text = f"{state} by {_get(ev, 'by')} on {day}"
    if state == "returned" and open_reasons(trip):
        text += ": " + "; ".join(open_reasons(trip))
    elif _get(ev, "comment"):
        text += f" ({_get(ev, 'comment')})"
    return text


def _content(doc: dict) -> dict:
    return {k: v for k, v in doc.items() if k not in _FREE_KEYS}


def new_event(
    trip: Any,
    action: str,
    *,
    by: str,
    at: datetime,
    comment: str = "",
    reasons: Iterable[str] = (),
    approved: dict | None = None,
) -> dict[str, Any]:
    """The event for `action` on `trip`, checked against its state; raises ReviewRefused."""
    if action not in ACTIONS:
        raise ReviewRefused(f"review step {action!r} is unknown; accepted: {', '.join(ACTIONS)}.")
    by = (by or "").strip()
    if not by:
        raise ReviewRefused("--by is empty; accepted: the reviewer's name or initials (up to 80 characters).")
    if len(by) > 80:
        raise ReviewRefused("--by is longer than 80 characters; accepted: a name or initials.")
    if at.tzinfo is None:
        raise ValueError("at must carry a time zone")
    reasons = [r.strip() for r in reasons if r and r.strip()]
    if action == "returned" and not reasons:
        raise ReviewRefused("--reason is empty; a returned trip needs at least one reason the crew can act on.")
    if action == "corrected" and not reasons:
        raise ReviewRefused("--reason is empty; a correction of an approved trip needs a reason.")
    state = review_state(trip)
    if state not in _ALLOWED_FROM[action]:
        hint = {
            "in progress": "the crew has not ended it yet",
            "approved": "an approved trip changes only through 'streamtab trip correct' with a reason",
            "returned": "it is with the crew until they resubmit it",
        }.get(state, "")
        verb = {
            "reviewed": "mark as reviewed",
            "approved": "approve",
            "returned": "return",
            "resubmitted": "resubmit",
            "corrected": "correct",
        }[action]
        raise ReviewRefused(f"cannot {verb} a trip that is {state}" + (f" ({hint})." if hint else "."))
    import uuid

    event: dict[str, Any] = {
        "id": str(uuid.uuid4()),
        "action": action,
        "at": at.isoformat(),
        "by": by,
        "comment": comment.strip()[:2000],
        "reasons": reasons,
        "revision": _get(trip, "revision"),
    }
    if approved is not None:
        event["approved"] = approved
    return event


def with_correction(trip: Any, stored: dict, *, reason: str, by: str, at: datetime) -> Any:
    """For a correction command: `trip` (the edited Trip) with a ``corrected`` event added when the
    stored trip is approved (keeping `stored`, the approved document, readable); unchanged otherwise.
    Raises ReviewRefused for an empty reason or name."""
    if review_state(stored) != "approved":
        return trip
    from core.records.models import ReviewEvent

    approved = {k: v for k, v in stored.items() if k not in ("audit",)}
    ev = new_event(stored, "corrected", by=by, at=at, reasons=[reason], approved=approved)
    return trip.model_copy(update={REVIEW_KEY: [*_events(trip), ReviewEvent.model_validate(ev, strict=False)]})


def approved_version(trip: Any) -> dict | None:
    """The document as it was last approved before a correction (None when never corrected)."""
    corrected = [e for e in _events(trip) if _get(e, "action") == "corrected" and _get(e, "approved")]
    return dict(_get(max(corrected, key=_key), "approved")) if corrected else None


def check_change(old: dict | None, new: dict) -> None:
    """Refuses (ReviewRefused) an edit of an approved trip that does not add a correction event.

    Review steps themselves and bookkeeping are free; any other change to an approved trip must
    come with a new ``corrected`` event (``streamtab trip correct``), which sends it back to reviewed.
    """
    if old is None or review_state(old) != "approved":
        return
    if _content(old) == _content(new):
        return
    old_ids = {str(_get(e, "id")) for e in _events(old)}
    if any(_get(e, "action") == "corrected" and str(_get(e, "id")) not in old_ids for e in _events(new)):
        return
    raise ReviewRefused(
        f"trip {old.get('id')} is approved; change it with 'streamtab trip correct' and a "
        "reason, which sends it back for review and keeps the approved version readable."
    )
