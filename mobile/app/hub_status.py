"""What the sync screen says about the trips here: which reached the hub, which wait, which hold conflicts (no kivy).

Read from the sync outbox (`sync.status`) and the store's trip list; the controller forwards to `overview`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

from core.records.messages import when_text

__all__ = ["HubOverview", "overview", "send_result", "progress_line", "RESULT_MARK"]

#: The mark before a trip's line after a send, by its result.
RESULT_MARK = {"pushed": "✓", "unchanged": "○", "conflict": "▲", "failed": "■"}


@dataclass
class HubOverview:
    """One summary sentence and one line per trip, already as text."""

    summary: str
    lines: list[str] = field(default_factory=list)
    titles: dict[str, str] = field(default_factory=dict)  # trip id -> "program · crew", for a send's result


def _latest(times: list[str | None]) -> datetime | None:
    out = None
    for t in times:
        try:
            when = datetime.fromisoformat(t) if t else None
        except ValueError:
            when = None
        if when is not None and when.utcoffset() is not None and (out is None or when > out):
            out = when
    return out


def overview(ctl: Any) -> HubOverview:
    """Every trip on this tablet and where it stands with the hub, waiting ones first."""
    try:
        import sync

        states = {s.trip_id: s for s in sync.status(ctl.store)}
    except Exception:  # noqa: BLE001 - without the outbox the trips still show, as waiting
        states = {}
    trips = list(ctl.store.list_trips())
    if not trips:
        return HubOverview("No trips on this tablet yet.")
    waiting, sent, conflicts = [], [], []
    titles: dict[str, str] = {}
    last = _latest([h.pushed_at for s in states.values() for h in s.hubs])
    for t in trips:
        crew = ", ".join(t.crew) if isinstance(t.crew, list) else str(t.crew or "")
        titles[t.id] = f"{t.program or 'Trip'} · {crew or '—'}"
        title = f"{titles[t.id]} · {when_text(t.started_at)}"
        st = states.get(t.id)
        open_ = "" if t.ended_at else " (trip still open)"
        if st is not None and st.conflicts:
            conflicts.append(f"▲ CONFLICT: {title} — settle it on the stop or end screen: {st.conflicts[0]}")
        if st is None or st.state == "never pushed":
            waiting.append(f"● WAITING: {title} — not sent yet{open_}")
        elif st.state == "changed":
            waiting.append(f"● WAITING: {title} — changed since it was last sent{open_}")
        else:
            sent.append(f"✓ AT THE HUB: {title}")
    summary = (
        f"On this tablet: {len(trips)} trip{'s' if len(trips) != 1 else ''} · {len(sent)} at the hub · "
        f"{len(waiting)} waiting to send · {len(conflicts)} with conflicts"
    )
    summary += f" · last reached the hub {when_text(last)}." if last else " · none sent from here yet."
    return HubOverview(summary, conflicts + waiting + sent, titles)


def progress_line(trip_id: str, result: str) -> str:
    """One trip's line while a send runs."""
    return f"{RESULT_MARK.get(result, '●')} trip {trip_id[:8]}: {result}"


def send_result(report: Any, titles: dict[str, str]) -> HubOverview:
    """What a finished send did: one sentence of counts and a line per trip (`titles`: trip id → title)."""
    lines = []
    for r in report.per_trip:
        line = f"{RESULT_MARK.get(r.result, '●')} {r.result.upper()}: {titles.get(r.trip_id, r.trip_id[:8])}"
        if r.message:
            line += f" — {r.message}"
        for c in r.conflicts:
            line += f"\n    ▲ {c}"
        lines.append(line)
    left = "" if report.failed == 0 else " — the failed ones stay on this tablet and go next time"
    summary = (
        f"{'✓' if report.failed == 0 else '▲'} Sent {report.pushed} · unchanged {report.unchanged} · "
        f"conflicts {report.conflicts} · failed {report.failed}{left}"
    )
    return HubOverview(summary, lines)
