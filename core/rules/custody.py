"""Chain of custody on trip records: hand-offs of bottles, signatures, the lab's receipt, gaps.

Pure: a Trip and the hand-off in, a new Trip out; no disk, no clock (``now`` is passed in). The
records live in ``Trip.custody`` (:class:`core.records.models.CustodyRecord`), so sync carries them
like any other list of the trip (merged by id) and the report prints them.

A bottle's chain is its hand-offs in time order. Findings (computed, never stored):

==============================  ========  ===================================================
``custody.none``                warning   no hand-off recorded for the bottle
``custody.gap``                 warning   a hand-off by someone the chain never gave it to
``custody.no_lab_receipt``      warning   no hand-off received at the lab
``custody.before_collection``   warning   a hand-off timed before the bottle was collected
``custody.unsigned``            note      a hand-off typed without signatures
``custody.receipt_warm``        warning   received warmer than the sample's cooling limit
``custody.receipt_frozen``      warning   received at 0 °C or below where freezing is not allowed
``custody.receipt_temp_missing`` note     received at the lab without a temperature, cooling asked
``custody.analysed_before_receipt`` warning  a result in use analysed before the lab's receipt
==============================  ========  ===================================================

The cooling limits come from the holding-time table (:data:`core.science.holding.HOLDING_TIMES`:
BOD cool to ≤ 6 °C, not frozen; US 40 CFR 136.3 Table II, from memory). The program's SOP and
local regulations decide what a finding means for the result.
"""

from __future__ import annotations

import itertools
from collections.abc import Iterable
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from typing import Any

from core.flags import Flag, Severity
from core.records.models import Bottle, CustodyRecord, Quantity, Signature, Stop, Trip, new_id
from core.timefmt import when_text

__all__ = [
    "CustodyInputError",
    "BottleCustody",
    "HandoffOutcome",
    "add_handoff",
    "sign_handoff",
    "custody_chains",
    "same_person",
    "FUTURE_SLACK_S",
]

#: How far after ``now`` a hand-off time may lie (clocks of two devices differ), s [common practice].
FUTURE_SLACK_S = 300.0


class CustodyInputError(ValueError):
    """A hand-off that cannot be recorded: ``field`` names the input; the message the accepted values."""

    def __init__(self, field: str, message: str):
        super().__init__(message)
        self.field = field
        self.message = message


def same_person(a: str, b: str) -> bool:
    """Two typed names are the same person: case, spacing and full stops aside ("R.O." == "r. o.")."""

    def key(s: str) -> str:
        return "".join(ch for ch in (s or "").casefold() if ch.isalnum())

    return bool(key(a)) and key(a) == key(b)


@dataclass(frozen=True)
class HandoffOutcome:
    """What :func:`add_handoff` returns: the new trip, the new record and the bottles' findings."""

    trip: Trip
    record: CustodyRecord
    flags: list[Flag]


@dataclass(frozen=True)
class BottleCustody:
    """One bottle's chain: its stop, the hand-offs in time order, the lab receipt and findings."""

    stop: Stop
    bottle: Bottle
    hops: list[CustodyRecord]
    receipt: CustodyRecord | None
    flags: list[Flag] = field(default_factory=list)

    @property
    def status(self) -> str:
        """ "at the lab", "in transit" (handed over, not received at the lab) or "no record"."""
        if self.receipt is not None:
            return "at the lab"
        return "in transit" if self.hops else "no record"

    def to_dict(self) -> dict[str, Any]:
        return {
            "bottle_id": self.bottle.id,
            "label": self.bottle.label,
            "kind": self.bottle.kind,
            "site_id": self.stop.site_id,
            "status": self.status,
            "hops": [h.id for h in self.hops],
            "receipt": self.receipt.id if self.receipt else None,
            "flags": [f.to_dict() for f in self.flags],
        }


def _aware(t: Any, name: str) -> datetime:
    if not isinstance(t, datetime) or t.tzinfo is None or t.utcoffset() is None:
        raise CustodyInputError(
            name, f"{name} has no time zone; accepted: an ISO 8601 time with a zone, e.g. 2026-06-09T13:10-07:00"
        )
    return t


def _bottles(trip: Trip) -> list[tuple[Stop, Bottle]]:
    return [(s, b) for s in sorted(trip.stops, key=lambda s: s.arrived_at) for b in s.bottles]


def add_handoff(
    trip: Trip,
    *,
    relinquished_by: str,
    received_by: str,
    at: datetime,
    now: datetime,
    bottle_refs: Iterable[str] | None = None,
    at_lab: bool = False,
    temp: Quantity | None = None,
    condition: str = "",
    notes: str = "",
    relinquished_signature: Signature | None = None,
    received_signature: Signature | None = None,
) -> HandoffOutcome:
    """Appends a hand-off of bottles to ``trip.custody``.

    Parameters
    ----------
    trip : Trip
        The trip as stored (not changed; a new Trip is returned).
    relinquished_by, received_by : str
        The two people's names as typed (not blank, not the same person).
    at, now : datetime
        When the bottles changed hands and the current time (time-zone aware; ``at`` may lie at
        most :data:`FUTURE_SLACK_S` after ``now`` and not before any covered bottle's collection).
    bottle_refs : iterable of str, optional
        Labels (or ids) of the bottles handed over; None or empty: every bottle of the trip.
    at_lab : bool
        The receiver is the laboratory: this hand-off is the sample receipt.
    temp : Quantity, optional
        Temperature of the samples on receipt (°C), as typed.
    condition, notes : str
        Condition on receipt ("intact, on ice") and free notes.
    relinquished_signature, received_signature : Signature, optional
        Strokes drawn on the tablet; without them the hand-off is recorded as unsigned.

    Returns
    -------
    HandoffOutcome
        The new trip, the record and the findings of the covered bottles' chains after it.

    Raises
    ------
    CustodyInputError
        A blank name, the same person on both sides, an unknown bottle, a trip without bottles, a
        time without a zone, in the future or before a covered bottle was collected.
    """
    from core.rules.lab import LabInputError, find_bottle

    giver = (relinquished_by or "").strip()
    taker = (received_by or "").strip()
    if not giver:
        raise CustodyInputError(
            "relinquished_by", "relinquished by is blank; accepted: the name of the person handing the bottles over"
        )
    if not taker:
        raise CustodyInputError(
            "received_by", "received by is blank; accepted: the name of the person taking the bottles"
        )
    if same_person(giver, taker):
        raise CustodyInputError(
            "received_by", f"received by {taker!r} is the person handing over; accepted: another person's name"
        )
    _aware(at, "at")
    _aware(now, "now")
    if at > now + timedelta(seconds=FUTURE_SLACK_S):
        raise CustodyInputError(
            "at",
            f"the hand-off time {at.isoformat(timespec='minutes')} is in the future"
            f" (now is {now.isoformat(timespec='minutes')}); accepted: a time up to now",
        )
    pairs = _bottles(trip)
    if not pairs:
        raise CustodyInputError("bottles", f"trip {trip.id[:8]} has no bottles; accepted: a trip with bottles")
    refs = [r.strip() for r in (bottle_refs or []) if r and r.strip()]
    if refs:
        chosen: list[Bottle] = []
        for ref in refs:
            try:
                _, b, _ = find_bottle(trip, ref)
            except LabInputError as exc:
                raise CustodyInputError("bottles", exc.message) from None
            if b.id not in {c.id for c in chosen}:
                chosen.append(b)
    else:
        chosen = [b for _, b in pairs]
    early = [b for b in chosen if at < b.collected_at]
    if early:
        b = early[0]
        raise CustodyInputError(
            "at",
            f"the hand-off time {at.isoformat(timespec='minutes')} is before bottle"
            f" {b.label} was collected ({b.collected_at.isoformat(timespec='minutes')});"
            " accepted: a time after collection",
        )
    record = CustodyRecord(
        id=new_id(),
        bottle_ids=[b.id for b in chosen],
        relinquished_by=giver,
        received_by=taker,
        at=at,
        at_lab=bool(at_lab),
        temp=temp,
        condition=(condition or "").strip(),
        notes=(notes or "").strip(),
        relinquished_signature=relinquished_signature,
        received_signature=received_signature,
    )
    new_trip = trip.model_copy(update={"custody": list(trip.custody) + [record]})
    ids = set(record.bottle_ids)
    flags = [f for c in custody_chains(new_trip) if c.bottle.id in ids for f in c.flags]
    return HandoffOutcome(new_trip, record, flags)


def sign_handoff(trip: Trip, record_id: str, role: str, signature: Signature) -> Trip:
    """The trip with `signature` attached to one side of a hand-off.

    `role` is "relinquished" or "received"; the signature's name must be the person named on that
    side (:func:`same_person`). A side already signed is re-signed (the newer drawing is kept).
    """
    if role not in ("relinquished", "received"):
        raise CustodyInputError("role", f"role {role!r} is not accepted; accepted: relinquished or received")
    for i, rec in enumerate(trip.custody):
        if rec.id == record_id or (len(record_id) >= 8 and rec.id.startswith(record_id)):
            named = rec.relinquished_by if role == "relinquished" else rec.received_by
            if not same_person(named, signature.name):
                raise CustodyInputError(
                    "name",
                    f"the signature is by {signature.name!r}, but the hand-off names"
                    f" {named!r} as {role} by; accepted: {named}'s signature",
                )
            updated = rec.model_copy(update={f"{role}_signature": signature})
            custody = list(trip.custody)
            custody[i] = updated
            return trip.model_copy(update={"custody": custody})
    raise CustodyInputError(
        "record",
        f"hand-off {record_id!r} is not on trip {trip.id[:8]}; accepted: the id of"
        " one of its hand-offs (see 'streamtab custody list')",
    )


def _cooling(bottle: Bottle, stop_bottles: Iterable[Bottle]):
    from core.rules.lab import bottle_analysis
    from core.science.holding import HOLDING_TIMES

    pair = bottle_analysis(bottle, stop_bottles)
    return None if pair is None else HOLDING_TIMES.get(pair[1])


def custody_chains(trip: Trip) -> list[BottleCustody]:
    """Every bottle of the trip with its hand-offs in time order and the findings on its chain."""
    out: list[BottleCustody] = []
    for stop, b in _bottles(trip):
        hops = sorted((r for r in trip.custody if b.id in r.bottle_ids), key=lambda r: r.at)
        flags: list[Flag] = []
        if not hops:
            flags.append(
                Flag(
                    "custody.none",
                    Severity.WARNING,
                    f"Bottle {b.label} has no hand-off on record.",
                    "Record who took the bottle from the field crew (streamtab custody add).",
                    "custody",
                )
            )
        for prev, hop in itertools.pairwise(hops):
            if not same_person(prev.received_by, hop.relinquished_by):
                flags.append(
                    Flag(
                        "custody.gap",
                        Severity.WARNING,
                        f"Bottle {b.label} was handed over by {hop.relinquished_by} at {when_text(hop.at)},"
                        f" but the record before it shows it went to {prev.received_by}"
                        f" at {when_text(prev.at)}.",
                        "Find out who held the bottle in between and record that hand-off, or"
                        " qualify the results as the program's SOP says.",
                        "relinquished_by",
                    )
                )
        for hop in hops:
            if hop.at < b.collected_at:
                flags.append(
                    Flag(
                        "custody.before_collection",
                        Severity.WARNING,
                        f"The hand-off of bottle {b.label} at {when_text(hop.at)} is timed before its"
                        f" collection ({when_text(b.collected_at)}).",
                        "Correct the hand-off time or the collection time.",
                        "at",
                    )
                )
        unsigned = [h for h in hops if not h.signed]
        if unsigned:
            flags.append(
                Flag(
                    "custody.unsigned",
                    Severity.NOTE,
                    f"{len(unsigned)} hand-off(s) of bottle {b.label} carry typed names only, no signatures.",
                    "Have both people sign on the tablet, or file the paper form the SOP asks for.",
                    "signature",
                )
            )
        receipts = [h for h in hops if h.at_lab]
        receipt = receipts[0] if receipts else None
        if hops and receipt is None:
            flags.append(
                Flag(
                    "custody.no_lab_receipt",
                    Severity.WARNING,
                    f"Bottle {b.label} has no receipt at the lab: its last hand-off went to"
                    f" {hops[-1].received_by} at {when_text(hops[-1].at)}.",
                    "Record the lab's receipt with the temperature and condition on arrival.",
                    "custody",
                )
            )
        elif not hops:
            flags.append(
                Flag(
                    "custody.no_lab_receipt",
                    Severity.WARNING,
                    f"Bottle {b.label} has no receipt at the lab.",
                    "Record the lab's receipt with the temperature and condition on arrival.",
                    "custody",
                )
            )
        if receipt is not None:
            analysed = (r.analysed_at for r in b.lab_results if r.live and r.analysed_at is not None)
            first = min((at for at in analysed if at < receipt.at), default=None)
            if first is not None:
                flags.append(
                    Flag(
                        "custody.analysed_before_receipt",
                        Severity.WARNING,
                        f"Bottle {b.label} has a result analysed at {when_text(first)},"
                        f" before the lab's receipt at {when_text(receipt.at)}: the record does not show who"
                        " held it when it was analysed.",
                        "Correct the receipt or analysis time, or record the hand-off that came before"
                        " the analysis; qualify the result as the program's SOP says.",
                        "at",
                    )
                )
        rule = _cooling(b, stop.bottles)
        if receipt is not None and rule is not None and rule.cool_max_c is not None:
            if receipt.temp is None:
                flags.append(
                    Flag(
                        "custody.receipt_temp_missing",
                        Severity.NOTE,
                        f"Bottle {b.label} ({rule.label}) was received at the lab without a"
                        f" temperature; it must arrive at ≤ {rule.cool_max_c:g} °C.",
                        "Record the temperature on receipt (a temperature blank or the cooler).",
                        "temp",
                    )
                )
            else:
                t = receipt.temp.value
                if rule.no_freeze and t <= 0.0:
                    flags.append(
                        Flag(
                            "custody.receipt_frozen",
                            Severity.WARNING,
                            f"Bottle {b.label} ({rule.label}) was received at {t:g} °C: it may have"
                            " frozen, which the method does not allow.",
                            "Qualify the result as the program's SOP says.",
                            "temp",
                        )
                    )
                elif t > rule.cool_max_c:
                    flags.append(
                        Flag(
                            "custody.receipt_warm",
                            Severity.WARNING,
                            f"Bottle {b.label} ({rule.label}) was received at {t:g} °C, above the"
                            f" {rule.cool_max_c:g} °C it must be kept at or below.",
                            "Qualify the result as the program's SOP says.",
                            "temp",
                        )
                    )
        out.append(BottleCustody(stop, b, hops, receipt, flags))
    return out
