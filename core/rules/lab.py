"""The analyst's bench on trip records: Winkler DO and BOD5 results on bottles, duplicates, the pending list.

Everything here is pure: a Trip and bench inputs in, a new Trip out (with a
:class:`core.records.models.LabResult` appended to the bottle); no disk, no clock (``now`` is passed in).

A result is never replaced. A second titration (or BOD) of the same bottle needs a reason; it is
appended, and the earlier result stays in place with ``status`` "superseded" and
``superseded_by``/``superseded_at``/``superseded_reason`` set; the new one lists it in
``supersedes``. Findings are the result's typed ``flags``; ``status`` is "valid" or "invalid"
(a stop-and-check finding) for a live result (core.records.models.LabResult).

Layout of ``LabResult.inputs``:

=================  ==========================================================================
``entered``        the bench values as the analyst typed them (text from the CLI, else numbers)
``used``           the numbers the calculation used (mL, eq/L, mg/L, ...)
``derived``        intermediate values: original sample volume, normality and its source,
                   holding time, the meter's DO at that stop, BOD dilutions ...
=================  ==========================================================================

Caution: the Winkler reagents hurt people (concentrated sulfuric acid; the alkali-iodide-azide
reagent is corrosive and toxic). Follow the lab's SOP and the safety data sheets.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from typing import Any

from core.flags import Flag, Severity
from core.records.models import Bottle, FlagRecord, LabResult, Stop, Trip, analyte_key, new_id
from core.science.holding import HoldingClock, bottle_holding_kind, holding_clock
from core.science.temperature import f_to_c
from core.science.winkler import SAFETY_NOTE
from core.timefmt import when_text

__all__ = [
    "WINKLER_ANALYTE",
    "BOD_ANALYTE",
    "CBOD_ANALYTE",
    "WINKLER_METHOD",
    "BOD_METHOD",
    "CBOD_METHOD",
    "reported_bod",
    "CAUTION",
    "LabSettings",
    "LabInputError",
    "Standardisation",
    "LabOutcome",
    "DuplicateCheck",
    "PendingBottle",
    "analyte_key",
    "current_result",
    "find_bottle",
    "record_winkler",
    "record_bod",
    "duplicate_checks",
    "pending_bottles",
    "relative_percent_difference",
    "WINKLER_KINDS",
    "BOD_KINDS",
    "bottle_analysis",
    "bottle_clock",
    "bottle_holding_clock",
    "add_batch",
    "batch_for",
    "batch_qc",
    "standardisation_of",
]

#: Analyte names written by this module; the sample scenario already writes these. Readers match
#: them with :func:`analyte_key`, so "do-winkler" and "do_winkler" are the same analyte.
WINKLER_ANALYTE = "do_winkler"
BOD_ANALYTE = "bod5"
#: CBOD5 (nitrification inhibitor added) is its own analyte, never mixed with BOD5 (Standard Methods 5210 B).
CBOD_ANALYTE = "cbod5"
WINKLER_METHOD = "Standard Methods 4500-O C (Winkler, azide modification)"
BOD_METHOD = "Standard Methods 5210 B (5-day BOD, dilution)"
CBOD_METHOD = "Standard Methods 5210 B (5-day carbonaceous BOD, nitrification inhibited)"

#: Bottle kinds each analysis accepts.
WINKLER_KINDS = ("do-fixed", "duplicate")
BOD_KINDS = ("bod", "duplicate")

CAUTION = SAFETY_NOTE  # one caution text for field and lab (core.science.winkler)

#: BOD incubator temperature, 20 ± 1 °C (Standard Methods 5210 B, from memory).
_INCUBATOR_C = (19.0, 21.0)
_NOTES_MAX = 2000


class LabInputError(ValueError):
    """A bench input that cannot be accepted: ``field`` names it; the message gives the accepted range."""

    def __init__(self, field: str, message: str):
        super().__init__(message)
        self.field = field
        self.message = message


@dataclass(frozen=True)
class LabSettings:
    """The lab's QC thresholds (each a setting; the lab's SOP decides).

    Attributes
    ----------
    meter_tolerance_mg_l : float
        Largest accepted difference between the Winkler DO and the field meter's DO at the same
        stop, mg/L (> 0 to 5). Default 0.5 [common practice].
    duplicate_rpd_percent : float
        Largest accepted relative percent difference between a bottle and its field duplicate,
        % (> 0 to 200). Default 20 [common practice].
    duplicate_abs_mg_l : float
        Largest accepted absolute difference between a Winkler DO bottle and its field duplicate, mg/L
        (> 0 to 5). Default 0.2 [common practice]: beside the RPD, which at low DO is large for a small
        difference and at high DO small for a large one.
    standardisation_max_age_h : float
        A thiosulfate standardisation older than this when the sample is titrated gets a note, h
        (> 0). Default 24 [common practice: standardise daily].
    holding_overrides_h : dict of str to float
        The program's SOP holding times by kind ("do_winkler", "bod"), replacing the regulation's.
    future_slack_s : float
        How far after ``now`` an analysis time may lie (clock differences), s. Default 300.
    """

    meter_tolerance_mg_l: float = 0.5
    duplicate_rpd_percent: float = 20.0
    duplicate_abs_mg_l: float = 0.2
    standardisation_max_age_h: float = 24.0
    holding_overrides_h: dict[str, float] = field(default_factory=dict)
    future_slack_s: float = 300.0

    def __post_init__(self) -> None:
        _num(self.meter_tolerance_mg_l, "meter_tolerance_mg_l", 0.0, 5.0, "mg/L", lo_open=True)
        _num(self.duplicate_rpd_percent, "duplicate_rpd_percent", 0.0, 200.0, "%", lo_open=True)
        _num(self.duplicate_abs_mg_l, "duplicate_abs_mg_l", 0.0, 5.0, "mg/L", lo_open=True)
        _num(self.standardisation_max_age_h, "standardisation_max_age_h", 0.0, 24 * 366.0, "h", lo_open=True)
        _num(self.future_slack_s, "future_slack_s", 0.0, 86400.0, "s")


@dataclass(frozen=True)
class Standardisation:
    """A bi-iodate standardisation of the thiosulfate titrant (the normality's source).

    ``titrant_ml`` of thiosulfate titrated ``standard_ml`` of ``standard_normality`` KH(IO3)2;
    N = N_std · V_std / V_titrant (Standard Methods 4500-O C, from memory).
    """

    titrant_ml: float
    standard_ml: float = 20.0
    standard_normality: float = 0.025
    standardised_at: datetime | None = None


@dataclass(frozen=True)
class LabOutcome:
    """What a recording call returns: the new trip, the new result and where it went."""

    trip: Trip
    result: LabResult
    stop: Stop
    bottle: Bottle
    superseded: list[str]
    flags: list[Flag]

    def to_dict(self) -> dict[str, Any]:
        return {
            "trip_id": self.trip.id,
            "stop_id": self.stop.id,
            "site_id": self.stop.site_id,
            "bottle_id": self.bottle.id,
            "bottle_label": self.bottle.label,
            "bottle_kind": self.bottle.kind,
            "result": self.result.model_dump(mode="json"),
            "superseded": list(self.superseded),
            "flags": [f.to_dict() for f in self.flags],
        }


# --------------------------------------------------------------------------------------------
# Small helpers
# --------------------------------------------------------------------------------------------
def _num(x: Any, name: str, lo: float | None, hi: float | None, unit: str, *, lo_open: bool = False) -> float:
    if isinstance(x, bool) or not isinstance(x, (int, float)):
        raise LabInputError(name, f"{name} = {x!r} is not a number; accepted: {_range(lo, hi, unit, lo_open)}")
    v = float(x)
    if not math.isfinite(v) or (lo is not None and (v < lo or (lo_open and v == lo))) or (hi is not None and v > hi):
        hint = ""
        if unit == "°C":
            try:
                as_c = f_to_c(v)  # the value read as °F; refused below absolute zero or not finite
            except ValueError:
                as_c = None
            if as_c is not None and (lo is None or lo <= as_c) and (hi is None or as_c <= hi):
                hint = f" — was it entered in °F? ({v:g} °F is {as_c:.1f} °C)"
        raise LabInputError(name, f"{name} = {v:g} is out of range; accepted: {_range(lo, hi, unit, lo_open)}{hint}")
    return v


def _range(lo, hi, unit, lo_open=False) -> str:
    u = f" {unit}" if unit else ""
    if lo is not None and hi is not None:
        return f"{'above ' if lo_open else ''}{lo:g} to {hi:g}{u}"
    if lo is not None:
        return f"{'above' if lo_open else 'at least'} {lo:g}{u}"
    return f"at most {hi:g}{u}"


def _aware(t: Any, name: str) -> datetime:
    if not isinstance(t, datetime):
        raise LabInputError(
            name,
            f"{name} = {t!r} is not a date-time; accepted: an ISO 8601 time with a zone, e.g. 2026-06-09T11:20-07:00",
        )
    if t.tzinfo is None or t.utcoffset() is None:
        raise LabInputError(
            name,
            f"{name} = {t.isoformat()} has no time zone; accepted: an ISO 8601 time with a"
            " zone, e.g. 2026-06-09T11:20-07:00",
        )
    return t


def _fmt_h(hours: float) -> str:
    """A span as a person reads it: minutes under 1 h, hours under 2 days, else days."""
    if abs(hours) < 1:
        return f"{hours * 60:.0f} min"
    return f"{hours:.1f} h" if abs(hours) < 48 else f"{hours / 24:.1f} days"


def current_result(bottle: Bottle, analyte: str) -> LabResult | None:
    """The bottle's latest result for `analyte` that no later result superseded (None when none)."""
    key = analyte_key(analyte)
    live = [r for r in bottle.lab_results if analyte_key(r.analyte) == key and r.live]
    return live[-1] if live else None


def _flag(code: str, severity: Severity, message: str, action: str, field_: str | None = None) -> Flag:
    return Flag(code, severity, message, action, field_)


def _sev_rank(f: Flag) -> int:
    return Severity(f.severity).rank


def _analysis_bottle(
    trip: Trip,
    bottle_ref: str,
    kinds: tuple[str, ...],
    not_kind: str,
    analysed_at: datetime,
    now: datetime,
    settings: LabSettings,
) -> tuple[Stop, Bottle, list[Flag]]:
    """The bottle an analysis is for: found by label, of a kind that analysis takes, analysed
    neither before it was collected nor in the future."""
    stop, bottle, flags = find_bottle(trip, bottle_ref, kinds)
    if bottle.kind not in kinds:
        raise LabInputError(
            "bottle",
            f"bottle {bottle.label} is a {bottle.kind} bottle, {not_kind}; accepted: a {' or '.join(kinds)} bottle",
        )
    _check_times(analysed_at, now, settings, bottle)
    return stop, bottle, flags


def find_bottle(trip: Trip, ref: str, kinds: tuple[str, ...] | None = None) -> tuple[Stop, Bottle, list[Flag]]:
    """The stop and bottle a label (or a bottle id, or its first 8 or more characters) names.

    A label used on two bottles of the trip is settled by `kinds` when exactly one of them has an
    accepted kind (a ``lab.duplicate_label`` warning says so); otherwise :class:`LabInputError`
    lists the choices. An unknown label lists the trip's labels.
    """
    from core.rules.report import kind_text

    ref = (ref or "").strip()
    if not ref:
        raise LabInputError(
            "bottle", "bottle label is empty; accepted: one of this trip's bottle labels: " + _labels(trip)
        )
    pairs = [(s, b) for s in trip.stops for b in s.bottles]
    hits = [(s, b) for s, b in pairs if b.label == ref]
    if not hits:
        hits = [(s, b) for s, b in pairs if b.label.casefold() == ref.casefold()]
    if not hits:
        hits = [(s, b) for s, b in pairs if b.id == ref or (len(ref) >= 8 and b.id.startswith(ref))]
    if not hits:
        raise LabInputError(
            "bottle",
            f"bottle {ref!r} is not on trip {trip.id[:8]}; accepted: one of its bottle labels: {_labels(trip)}",
        )
    flags: list[Flag] = []
    if len(hits) > 1:
        fitting = [(s, b) for s, b in hits if kinds is None or b.kind in kinds]
        if len(fitting) != 1:
            choices = ", ".join(f"{b.id[:8]} ({b.kind} at {s.site_id})" for s, b in hits)
            raise LabInputError(
                "bottle",
                f"bottle label {ref!r} is on {len(hits)} bottles of trip {trip.id[:8]};"
                f" accepted: the bottle id (8 or more characters) of one of {choices}",
            )
        s, b = fitting[0]
        flags.append(
            _flag(
                "lab.duplicate_label",
                Severity.WARNING,
                f"Bottle label {ref} is used on {len(hits)} bottles of this trip; the one at {s.site_id}"
                f" ({kind_text(b.kind)}) was taken because it is the only one of a kind this analysis accepts.",
                "Check the bottle against the field sheet and relabel one of them.",
                "label",
            )
        )
        hits = fitting
    s, b = hits[0]
    return s, b, flags


def _labels(trip: Trip) -> str:
    labels = [b.label for s in trip.stops for b in s.bottles]
    return ", ".join(dict.fromkeys(labels)) if labels else "(this trip has no bottles)"


def _check_times(
    analysed_at: datetime, now: datetime, settings: LabSettings, bottle: Bottle, name: str = "analysed_at"
) -> None:
    _aware(analysed_at, name)
    _aware(now, "now")
    if analysed_at > now + timedelta(seconds=settings.future_slack_s):
        raise LabInputError(
            name,
            f"{name} = {analysed_at.isoformat()} is in the future (now is"
            f" {now.isoformat(timespec='minutes')}); accepted: a time up to now",
        )
    if analysed_at < bottle.collected_at:
        raise LabInputError(
            name,
            f"{name} = {analysed_at.isoformat()} is before bottle {bottle.label} was collected"
            f" ({bottle.collected_at.isoformat()}); accepted: a time after collection",
        )


def _notes(analyst_notes: str, flags: list[Flag], extra: Iterable[str] = ()) -> str:
    parts = [analyst_notes.strip()] if analyst_notes and analyst_notes.strip() else []
    parts.extend(extra)
    parts.extend(f"{f.severity.value if hasattr(f.severity, 'value') else f.severity}: {f.message}" for f in flags)
    text = " ".join(parts)
    return text if len(text) <= _NOTES_MAX else text[: _NOTES_MAX - 1] + "…"


def _append(
    trip: Trip, stop: Stop, bottle: Bottle, result: LabResult, analyte: str, redo_reason: str | None, at: datetime
) -> tuple[Trip, Stop, Bottle, list[str]]:
    """The trip with `result` appended to the bottle; earlier live results of the analyte marked superseded."""
    key = analyte_key(analyte)
    live = [r for r in bottle.lab_results if analyte_key(r.analyte) == key and r.live]
    live_ids = {r.id for r in live}
    superseded: list[str] = []
    results: list[LabResult] = []
    for r in bottle.lab_results:
        if r.id in live_ids:
            note = f"Superseded by result {result.id[:8]} on {when_text(at)} ({redo_reason}); kept for the record."
            notes = (r.notes + " " + note).strip() if r.notes else note
            results.append(
                r.model_copy(
                    update={
                        "status": "superseded",
                        "superseded_by": result.id,
                        "superseded_at": at,
                        "superseded_reason": (redo_reason or "")[:400],
                        "notes": notes[:_NOTES_MAX],
                    }
                )
            )
            superseded.append(r.id)
        else:
            results.append(r)
    if superseded:
        result = result.model_copy(update={"supersedes": superseded})
    results.append(result)
    new_bottle = bottle.model_copy(update={"lab_results": results})
    new_stop = stop.model_copy(update={"bottles": [new_bottle if b.id == bottle.id else b for b in stop.bottles]})
    new_trip = trip.model_copy(update={"stops": [new_stop if s.id == stop.id else s for s in trip.stops]})
    return new_trip, new_stop, new_bottle, superseded


def _redo_check(bottle: Bottle, analyte: str, redo_reason: str | None, what: str) -> LabResult | None:
    prev = current_result(bottle, analyte)
    if prev is not None and not (redo_reason and redo_reason.strip()):
        shown = "no value" if prev.value is None else f"{prev.value:.2f} {prev.unit}".strip()
        when = when_text(prev.analysed_at) if prev.analysed_at else "an unrecorded time"
        raise LabInputError(
            "redo",
            f"bottle {bottle.label} already has a {what} result ({shown}, {prev.id[:8]},"
            f" analysed {when}); accepted: a reason for the re-analysis (both results are"
            " kept, the earlier one marked superseded)",
        )
    return prev


def _meter_do(stop: Stop) -> tuple[float | None, str]:
    """The field meter's DO at the stop in mg/L, and where it came from."""
    if stop.do is None:
        return None, "no meter DO recorded at this stop"
    if stop.do.unit == "mg/L":
        return float(stop.do.value), "meter reading (mg/L)"
    if stop.derived is not None and stop.derived.do_mg_l is not None:
        return float(stop.derived.do_mg_l), f"meter reading {stop.do.value:g} % converted at the stop's saturation"
    return None, f"meter reading {stop.do.value:g} % could not be converted (no saturation at this stop)"


def stop_do_mg_l(stop: Stop) -> float | None:
    """The stop's DO in mg/L for tables and plots: the derived value, else a meter reading typed in mg/L."""
    d = stop.derived
    if d is not None and d.do_mg_l is not None:
        return d.do_mg_l
    return stop.do.value if stop.do is not None and stop.do.unit == "mg/L" else None


def live_winkler_values(stop: Stop) -> list[float]:
    """The stop's Winkler DO values (mg/L) that stand: each bottle's current result, not marked invalid."""
    return [
        r.value
        for b in stop.bottles
        for r in [current_result(b, WINKLER_ANALYTE)]
        if r is not None and r.value is not None and r.valid is not False
    ]


# --------------------------------------------------------------------------------------------
# Winkler
# --------------------------------------------------------------------------------------------
def record_winkler(
    trip: Trip,
    bottle_ref: str,
    *,
    titrant_ml: float,
    titrated_ml: float,
    normality: float | None = None,
    standardisation: Standardisation | None = None,
    bottle_ml: float = 300.0,
    reagents_ml: float = 2.0,
    analysed_at: datetime,
    now: datetime,
    analyst: str = "",
    notes: str = "",
    redo_reason: str | None = None,
    settings: LabSettings | None = None,
    entered: dict[str, Any] | None = None,
    batch: Any = None,
) -> LabOutcome:
    """Appends a Winkler DO result to a do-fixed (or duplicate) bottle of `trip`.

    DO = V_titrant · N · 8000 / V_original, V_original = V_titrated · (V_bottle − V_reagents) / V_bottle
    (:func:`core.science.winkler.winkler_do_mg_l`). With 200 mL of original sample and 0.025 N titrant,
    1 mL of titrant is 1 mg/L.

    Parameters
    ----------
    trip : Trip
        The trip as stored (not changed; a new Trip is returned).
    bottle_ref : str
        The bottle's label (or id, or 8+ leading characters of its id).
    titrant_ml : float
        Thiosulfate used to the starch end point, mL (0 to 100).
    titrated_ml : float
        Volume of the fixed, acidified sample titrated, mL (> 0, ≤ bottle_ml; usually 201 or 203).
    normality : float, optional
        Titrant normality, eq/L (> 0 to 1; usually 0.025). Give it or `standardisation`, not both.
    standardisation : Standardisation, optional
        The bi-iodate standardisation the normality comes from; recorded as the normality's source.
    bottle_ml, reagents_ml : float
        Bottle volume (usually 300 mL) and total fixing reagents added (1 + 1 = 2 mL; older 2 + 2 = 4 mL).
    analysed_at, now : datetime
        When the titration was done and the current time (time-zone aware; the analysis may not
        lie in the future nor before collection).
    analyst, notes : str
        Who titrated (initials) and free notes.
    redo_reason : str, optional
        Required when the bottle already has a live Winkler result: the earlier one is kept and
        marked superseded.
    settings : LabSettings, optional
        Thresholds (meter tolerance, standardisation age, holding-time overrides).
    entered : dict, optional
        The inputs as the analyst typed them (kept in ``inputs["entered"]``).
    batch : LabBatch, optional
        The bench batch: its thiosulfate standardisation is used when neither `normality` nor
        `standardisation` is given (the batch is named in ``inputs["derived"]["batch"]``).

    Returns
    -------
    LabOutcome
        Flags: ``lab.holding_exceeded`` (stop-and-check; more than 8 h from fixing, 40 CFR 136.3
        Table II from memory), ``lab.not_fixed`` (warning; no fixing time, clock from collection),
        ``lab.meter_disagrees`` (warning; |Winkler − meter| above the tolerance),
        ``lab.do_implausible`` (stop-and-check; above 20 mg/L), ``lab.standardisation_old`` (note),
        ``lab.duplicate_label`` (warning). ``valid`` is False when a stop-and-check flag fired.

    Raises
    ------
    LabInputError
        A wrong bottle kind, an unknown label, both or neither of normality and standardisation,
        a volume out of range, an analysis time in the future or before collection, a repeat
        without a reason. The message names the input and the accepted range.

    References
    ----------
    Standard Methods 4500-O C (azide modification) [from memory]; US 40 CFR 136.3 Table II [from memory].
    """
    from core.science.winkler import original_sample_ml, thiosulfate_normality, winkler_do_mg_l

    settings = settings or LabSettings()
    stop, bottle, flags = _analysis_bottle(
        trip, bottle_ref, WINKLER_KINDS, "not fixed for Winkler", analysed_at, now, settings
    )
    if normality is None and standardisation is None and batch is not None:
        standardisation = standardisation_of(batch)
    if (normality is None) == (standardisation is None):
        raise LabInputError(
            "normality",
            "give the titrant normality or its standardisation, not "
            + ("both" if normality is not None else "neither")
            + "; accepted: normality in eq/L (usually 0.025) or a bi-iodate standardisation",
        )
    prev = _redo_check(bottle, WINKLER_ANALYTE, redo_reason, "Winkler DO")

    derived: dict[str, Any] = {}
    if batch is not None:
        derived["batch"] = {"id": batch.id, "name": batch.name}
    if standardisation is not None:
        try:
            n = float(
                thiosulfate_normality(
                    standardisation.titrant_ml, standardisation.standard_ml, standardisation.standard_normality
                )
            )
        except ValueError as exc:
            msg = str(exc).splitlines()[0]
            raise LabInputError("standardisation." + msg.split(" ", 1)[0], "standardisation " + msg) from None
        src: dict[str, Any] = {
            "kind": "standardisation",
            "titrant_ml": standardisation.titrant_ml,
            "standard_ml": standardisation.standard_ml,
            "standard_normality": standardisation.standard_normality,
            "standard": "potassium bi-iodate, KH(IO3)2",
            "standardised_at": (
                standardisation.standardised_at.isoformat() if standardisation.standardised_at else None
            ),
        }
    elif normality is not None:
        n = normality
        src = {"kind": "entered"}
    try:
        do = float(winkler_do_mg_l(titrant_ml, n, titrated_ml, bottle_ml, reagents_ml))
        orig = float(original_sample_ml(titrated_ml, bottle_ml, reagents_ml))
    except ValueError as exc:
        msg = str(exc).splitlines()[0]
        raise LabInputError(msg.split(" ", 1)[0], msg) from None
    n = float(n)
    derived.update(original_sample_ml=orig, normality=n, normality_source=src)

    if standardisation is not None and standardisation.standardised_at is not None:
        st = _aware(standardisation.standardised_at, "standardised_at")
        age_h = (analysed_at - st).total_seconds() / 3600.0
        derived["standardisation_age_h"] = age_h
        if age_h < 0:
            raise LabInputError(
                "standardised_at",
                f"standardised_at = {st.isoformat()} is after the titration"
                f" ({analysed_at.isoformat()}); accepted: a standardisation done before it",
            )
        if age_h > settings.standardisation_max_age_h:
            flags.append(
                _flag(
                    "lab.standardisation_old",
                    Severity.NOTE,
                    f"The thiosulfate was standardised {_fmt_h(age_h)} before this titration, more than"
                    f" the {settings.standardisation_max_age_h:g} h the lab's setting allows.",
                    "Standardise the titrant again and record the new normality.",
                    "standardised_at",
                )
            )

    # Holding time: 8 h from fixing (from collection when no fixing time is recorded).
    if bottle.fixed_at is None:
        flags.append(
            _flag(
                "lab.not_fixed",
                Severity.WARNING,
                f"Bottle {bottle.label} has no fixing time on record; the Winkler holding time was"
                " counted from collection.",
                "Check the field sheet for the fixing time; qualify the result if it is unknown.",
                "fixed_at",
            )
        )
    fixed = bottle.fixed_at if bottle.fixed_at is not None and bottle.fixed_at >= bottle.collected_at else None
    if fixed is not None:
        from core.science.winkler import winkler_plausibility_flags

        flags.extend(winkler_plausibility_flags(collected_at=bottle.collected_at, fixed_at=fixed))
    if bottle.fixed_at is not None and fixed is None:
        flags.append(
            _flag(
                "lab.fixing_time_doubtful",
                Severity.WARNING,
                f"Bottle {bottle.label}'s fixing time ({when_text(bottle.fixed_at)}) is"
                f" before its collection ({when_text(bottle.collected_at)}); the"
                " holding time was counted from collection.",
                "Correct the field record's times.",
                "fixed_at",
            )
        )
    clock = _clock_of(bottle, "do_winkler", analysed_at, settings.holding_overrides_h)
    from_fixing = clock.clock_from == "fixing"
    start = fixed if (from_fixing and fixed is not None) else bottle.collected_at
    held_h = (analysed_at - start).total_seconds() / 3600.0
    derived["holding"] = {
        "kind": "do_winkler",
        "from": "fixing" if from_fixing else "collection",
        "held_h": held_h,
        "limit_h": clock.rule.hours,
        "deadline": clock.deadline.isoformat(),
        "citation": clock.rule.citation,
    }
    if clock.expired:
        flags.append(
            _flag(
                "lab.holding_exceeded",
                Severity.STOP,
                f"Titrated {_fmt_h(held_h)} after {'fixing' if from_fixing else 'collection'}, past the"
                f" {clock.rule.hours:g} h Winkler holding time (deadline"
                f" {when_text(clock.deadline)}).",
                "Report the result only as the program's SOP allows, qualified as past its holding time.",
                "analysed_at",
            )
        )

    # The field meter's DO at the same stop.
    meter, meter_src = _meter_do(stop)
    derived["meter_do_mg_l"] = meter
    derived["meter_do_source"] = meter_src
    derived["meter_tolerance_mg_l"] = settings.meter_tolerance_mg_l
    if meter is not None:
        diff = do - meter
        derived["meter_difference_mg_l"] = diff
        # What the burette should have read had the meter been right: a quick check for a typo.
        from core.science.winkler import expected_titrant_ml

        try:
            derived["titrant_ml_expected_from_meter"] = float(
                expected_titrant_ml(meter, n, titrated_ml, bottle_ml, reagents_ml)
            )
        except ValueError:
            derived["titrant_ml_expected_from_meter"] = None
        cal = [
            label
            for label, c in (("pre-trip calibration", trip.pre_calibration), ("post-trip check", trip.post_check))
            if c is not None and c.accepted is False
        ]
        derived["calibrations_not_accepted"] = cal
        if abs(diff) > settings.meter_tolerance_mg_l + 1e-9:
            seen = f" The trip's {' and '.join(cal)} {'was' if len(cal) == 1 else 'were'} not accepted." if cal else ""
            flags.append(
                _flag(
                    "lab.meter_disagrees",
                    Severity.WARNING,
                    f"Winkler DO {do:.2f} mg/L differs from the field meter's {meter:.2f} mg/L at"
                    f" {stop.site_id} by {diff:+.2f} mg/L, more than ±{settings.meter_tolerance_mg_l:g}"
                    " mg/L: a possible meter problem (calibration, membrane, drift) or fixing problem"
                    f" (air bubble, late or incomplete fixing).{seen}",
                    "Check the trip's calibration records and the field notes before relying on either value.",
                    "do",
                )
            )
    from core.science.winkler import winkler_plausibility_flags

    flags.extend(winkler_plausibility_flags(do_mg_l=do, normality=n))

    flags.sort(key=_sev_rank, reverse=True)
    used = {
        "titrant_ml": float(titrant_ml),
        "titrated_ml": float(titrated_ml),
        "bottle_ml": float(bottle_ml),
        "reagents_ml": float(reagents_ml),
        "normality": n,
    }
    if entered is None:
        entered = {k: v for k, v in used.items() if k != "normality"}
        if normality is not None:
            entered["normality"] = normality
    extra = [f"Re-titration: {(redo_reason or '').strip()}."] if prev is not None else []
    result = LabResult(
        id=new_id(),
        analyte=WINKLER_ANALYTE,
        value=do,
        unit="mg/L",
        analysed_at=analysed_at,
        analyst=(analyst or "").strip()[:40],
        method=WINKLER_METHOD,
        inputs={"entered": dict(entered), "used": used, "derived": derived},
        flags=[FlagRecord.from_flag(f) for f in flags],
        valid=not any(f.severity == Severity.STOP for f in flags),
        notes=_notes(notes, flags, extra),
    )
    new_trip, new_stop, new_bottle, superseded = _append(
        trip, stop, bottle, result, WINKLER_ANALYTE, redo_reason, analysed_at
    )
    return LabOutcome(new_trip, new_bottle.lab_results[-1], new_stop, new_bottle, superseded, flags)


# --------------------------------------------------------------------------------------------
# BOD5
# --------------------------------------------------------------------------------------------
def record_bod(
    trip: Trip,
    bottle_ref: str,
    *,
    dilutions: list[dict],
    seed_controls: list[dict] | None = None,
    blank_depletion_mg_l: float | None = None,
    gga_bod_mg_l: float | None = None,
    incubation_start: datetime | None = None,
    incubation_end: datetime | None = None,
    incubator_temp_c: float | None = None,
    analysed_at: datetime,
    now: datetime,
    analyst: str = "",
    notes: str = "",
    redo_reason: str | None = None,
    settings: LabSettings | None = None,
    entered: dict[str, Any] | None = None,
    nitrification_inhibitor: bool = False,
    batch: Any = None,
) -> LabOutcome:
    """Appends a BOD5 (or CBOD5) result (from a dilution series) to a bod (or duplicate) bottle of `trip`.

    BOD5 is the mean of the valid dilutions (:func:`core.science.bod.bod_from_dilutions`; a dilution counts
    with depletion ≥ 2.0 mg/L and residual DO ≥ 1.0 mg/L); seeded dilutions take the seed uptake
    from `seed_controls` (:func:`core.science.bod.seed_uptake_per_ml`) unless they carry their own.

    Parameters
    ----------
    dilutions : list of dict
        Each ``{initial_do_mg_l, final_do_mg_l, sample_ml[, bottle_ml, seed_ml, seed_uptake_mg_l_per_ml]}``.
    seed_controls : list of dict, optional
        Each ``{initial_do_mg_l, final_do_mg_l, seed_ml}``.
    blank_depletion_mg_l : float, optional
        Dilution-water blank depletion over the incubation, mg/L (≤ 0.20 accepted).
    gga_bod_mg_l : float, optional
        The batch's glucose–glutamic acid check, mg/L (198 ± 30.5 accepted).
    incubation_start, incubation_end : datetime, optional
        Set-up and read-out of the bottles (5 d ± 6 h accepted); the set-up must be within 48 h of
        collection (40 CFR 136.3 Table II, from memory; the SOP may override).
    incubator_temp_c : float, optional
        Incubator temperature, °C (20 ± 1 accepted).
    analysed_at, now, analyst, notes, redo_reason, settings, entered
        As in :func:`record_winkler`.
    nitrification_inhibitor : bool
        True when a nitrification inhibitor was added: the result is CBOD5 (analyte ``cbod5``), its own
        analyte with its own re-analysis history.
    batch : LabBatch, optional
        The bench batch the bottle was set up in: its blank, GGA check, seed controls and incubation
        fill whatever is not given here (the batch is named in ``inputs["derived"]["batch"]``).

    Returns
    -------
    LabOutcome
        The result's ``inputs["derived"]["report"]`` is the reportable value
        (:class:`core.science.bod.BodReport` as a dict: value, qualifier, text, basis, analyte; read it
        with :func:`reported_bod`). Flags from core.science.bod (``bod.*``) plus
        ``lab.bod_holding_exceeded`` (stop-and-check),
        ``lab.bod_times_missing``, ``lab.bod_blank_missing``, ``lab.bod_gga_missing`` (notes),
        ``lab.bod_incubator_temp`` (warning). ``value`` is None when no dilution is valid;
        ``valid`` is False then, or when a stop-and-check flag fired.

    References
    ----------
    Standard Methods 5210 B [from memory; blank and GGA limits from a summary of the 21st edition].
    """
    from core.science.bod import blank_check, bod_from_dilutions, gga_check, incubation_check, seed_uptake_per_ml

    settings = settings or LabSettings()
    stop, bottle, flags = _analysis_bottle(trip, bottle_ref, BOD_KINDS, "not a BOD sample", analysed_at, now, settings)
    analyte, what = (CBOD_ANALYTE, "CBOD5") if nitrification_inhibitor else (BOD_ANALYTE, "BOD5")
    prev = _redo_check(bottle, analyte, redo_reason, what)
    derived: dict[str, Any] = {}
    if batch is not None:
        derived["batch"] = {"id": batch.id, "name": batch.name}
        if seed_controls is None and batch.seed_controls:
            seed_controls = [dict(c) for c in batch.seed_controls]
        if blank_depletion_mg_l is None:
            blank_depletion_mg_l = batch.blank_depletion_mg_l
        if gga_bod_mg_l is None:
            gga_bod_mg_l = batch.gga_bod_mg_l
        if incubation_start is None and incubation_end is None:
            incubation_start, incubation_end = batch.incubation_start, batch.incubation_end
        if incubator_temp_c is None:
            incubator_temp_c = batch.incubator_temp_c

    dil = dilutions
    if seed_controls is not None:
        try:
            s = float(seed_uptake_per_ml(seed_controls))
        except ValueError as exc:
            raise LabInputError("seed_controls", f"seed_controls: {str(exc).splitlines()[0]}") from None
        derived["seed_uptake_mg_l_per_ml"] = s
        if isinstance(dil, list):
            dil = [
                dict(d, seed_uptake_mg_l_per_ml=d.get("seed_uptake_mg_l_per_ml", s))
                if isinstance(d, dict) and d.get("seed_ml")
                else d
                for d in dil
            ]
    try:
        r = bod_from_dilutions(dil, nitrification_inhibitor=bool(nitrification_inhibitor))
    except ValueError as exc:
        msg = str(exc).splitlines()[0]
        raise LabInputError("dilutions", msg if msg.startswith("dilutions") else f"dilutions: {msg}") from None
    flags.extend(r.flags)
    derived["dilutions"] = [d.to_dict() for d in r.dilutions]
    derived["valid_dilutions"] = sum(1 for d in r.dilutions if d.valid)
    derived["report"] = r.report.to_dict() if r.report is not None else None

    for value, name, check, code, missing, action in (
        (
            blank_depletion_mg_l,
            "blank_depletion_mg_l",
            blank_check,
            "lab.bod_blank_missing",
            "No dilution-water blank is recorded for this BOD result.",
            "Record the batch's blank depletion (≤ 0.20 mg/L accepted).",
        ),
        (
            gga_bod_mg_l,
            "gga_bod_mg_l",
            gga_check,
            "lab.bod_gga_missing",
            "No glucose–glutamic acid check is recorded for this BOD result.",
            "Record the batch's GGA check (198 ± 30.5 mg/L accepted).",
        ),
    ):
        if value is None:
            flags.append(_flag(code, Severity.NOTE, missing, action, name))
            continue
        try:
            f = check(value)
        except ValueError as exc:
            raise LabInputError(name, str(exc).splitlines()[0]) from None
        derived[name] = float(value)
        if f is not None:
            flags.append(f)
    if incubator_temp_c is not None:
        t = _num(incubator_temp_c, "incubator_temp_c", -10.0, 60.0, "°C")
        derived["incubator_temp_c"] = t
        if not (_INCUBATOR_C[0] <= t <= _INCUBATOR_C[1]):
            flags.append(
                _flag(
                    "lab.bod_incubator_temp",
                    Severity.WARNING,
                    f"The incubator was at {t:g} °C; BOD5 is incubated at 20 ± 1 °C.",
                    "Qualify the batch as the program's SOP says and check the incubator.",
                    "incubator_temp_c",
                )
            )

    if (incubation_start is None) != (incubation_end is None):
        raise LabInputError(
            "incubation_start" if incubation_start is None else "incubation_end",
            "incubation start and end go together; accepted: both times (set-up and read-out) or neither",
        )
    if incubation_start is None:
        flags.append(
            _flag(
                "lab.bod_times_missing",
                Severity.NOTE,
                "No incubation times are recorded, so the 48 h holding time and the 5 d ± 6 h"
                " incubation were not checked.",
                "Record the set-up and read-out times from the bench sheet.",
                "incubation_start",
            )
        )
    else:
        start = _aware(incubation_start, "incubation_start")
        end = _aware(incubation_end, "incubation_end")
        if start < bottle.collected_at:
            raise LabInputError(
                "incubation_start",
                f"incubation_start = {start.isoformat()} is before bottle"
                f" {bottle.label} was collected ({bottle.collected_at.isoformat()}); accepted: a"
                " set-up after collection",
            )
        if end > now + timedelta(seconds=settings.future_slack_s):
            raise LabInputError(
                "incubation_end",
                f"incubation_end = {end.isoformat()} is in the future; accepted: a read-out time up to now",
            )
        try:
            f = incubation_check(start, end)
        except ValueError as exc:
            raise LabInputError("incubation_end", str(exc).splitlines()[0]) from None
        if f is not None:
            flags.append(f)
        clock = holding_clock("bod", bottle.collected_at, start, overrides=settings.holding_overrides_h or None)
        held_h = (start - bottle.collected_at).total_seconds() / 3600.0
        derived["incubation_h"] = (end - start).total_seconds() / 3600.0
        derived["holding"] = {
            "kind": "bod",
            "from": "collection",
            "held_h": held_h,
            "limit_h": clock.rule.hours,
            "deadline": clock.deadline.isoformat(),
            "citation": clock.rule.citation,
        }
        if clock.expired:
            flags.append(
                _flag(
                    "lab.bod_holding_exceeded",
                    Severity.STOP,
                    f"The BOD bottles were set up {_fmt_h(held_h)} after collection, past the"
                    f" {clock.rule.hours:g} h holding time (deadline"
                    f" {when_text(clock.deadline)}).",
                    "Report the result only as the program's SOP allows, qualified as past its holding time.",
                    "incubation_start",
                )
            )

    flags.sort(key=_sev_rank, reverse=True)
    if entered is None:
        entered = {"dilutions": dilutions}
        for k, v in (
            ("seed_controls", seed_controls),
            ("blank_depletion_mg_l", blank_depletion_mg_l),
            ("gga_bod_mg_l", gga_bod_mg_l),
            ("incubator_temp_c", incubator_temp_c),
        ):
            if v is not None:
                entered[k] = v
        if incubation_start is not None and incubation_end is not None:
            entered["incubation_start"] = incubation_start.isoformat()
            entered["incubation_end"] = incubation_end.isoformat()
        if nitrification_inhibitor:
            entered["nitrification_inhibitor"] = True
    extra = [f"Repeat analysis: {(redo_reason or '').strip()}."] if prev is not None else []
    result = LabResult(
        # the value the 5210 B rules support: None for a bound (see the report) or dilutions not averaged
        id=new_id(),
        analyte=analyte,
        value=(r.report.value if r.report is not None and r.report.qualifier is None else None),
        unit="mg/L",
        analysed_at=analysed_at,
        analyst=(analyst or "").strip()[:40],
        method=CBOD_METHOD if nitrification_inhibitor else BOD_METHOD,
        inputs={"entered": _jsonable(entered), "used": {"dilutions": _jsonable(dil)}, "derived": derived},
        flags=[FlagRecord.from_flag(f) for f in flags],
        valid=bool(r.valid) and not any(f.severity == Severity.STOP for f in flags),
        notes=_notes(notes, flags, extra),
    )
    new_trip, new_stop, new_bottle, superseded = _append(trip, stop, bottle, result, analyte, redo_reason, analysed_at)
    return LabOutcome(new_trip, new_bottle.lab_results[-1], new_stop, new_bottle, superseded, flags)


def reported_bod(result: LabResult):
    """The reportable BOD5/CBOD5 of a lab result (:class:`core.science.bod.BodReport`), or None when it is
    not a BOD result or carries no dilutions to apply the rules to.

    Results recorded before the report was stored get it rebuilt from their stored dilutions by the same
    rules (:func:`core.science.bod.bod_report`).
    """
    from core.flags import Flag as _Flag
    from core.science.bod import BodDilution, BodReport, bod_report

    key = analyte_key(result.analyte)
    if key not in (analyte_key(BOD_ANALYTE), analyte_key(CBOD_ANALYTE)):
        return None
    derived = (result.inputs or {}).get("derived") or {}
    analyte = "CBOD5" if key == analyte_key(CBOD_ANALYTE) else "BOD5"
    stored = derived.get("report")
    if isinstance(stored, dict) and "text" in stored:
        return BodReport(
            stored.get("value"),
            stored.get("qualifier"),
            stored["text"],
            stored.get("basis", ""),
            stored.get("analyte", analyte),
        )
    dils = []
    for d in derived.get("dilutions") or []:
        try:
            dils.append(
                BodDilution(
                    bod_mg_l=float(d["bod_mg_l"]),
                    depletion_mg_l=float(d["depletion_mg_l"]),
                    valid=bool(d["valid"]),
                    flags=[
                        _Flag(
                            f["code"],
                            Severity(f["severity"]),
                            f.get("message", ""),
                            f.get("action", ""),
                            f.get("field"),
                        )
                        for f in d.get("flags") or []
                    ],
                    sample_ml=float(d["sample_ml"]),
                    bottle_ml=float(d.get("bottle_ml", 300.0)),
                    seed_correction_mg_l=float(d.get("seed_correction_mg_l", 0.0)),
                )
            )
        except (KeyError, TypeError, ValueError):
            return None
    if not dils:
        return None  # nothing to apply the rules to (e.g. a result typed in from elsewhere)
    return bod_report(dils, analyte)[0]


def _jsonable(x: Any) -> Any:
    if isinstance(x, dict):
        return {str(k): _jsonable(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_jsonable(v) for v in x]
    if isinstance(x, datetime):
        return x.isoformat()
    return x


# --------------------------------------------------------------------------------------------
# Field duplicates
# --------------------------------------------------------------------------------------------
def relative_percent_difference(a: float, b: float) -> float | None:
    """RPD = |a − b| / ((a + b) / 2) × 100, in %; None when both are 0 (no mean to compare to).

    Common practice (EPA-style QA plans) for field-duplicate precision.
    """
    a = _num(a, "a", 0.0, None, "")
    b = _num(b, "b", 0.0, None, "")
    mean = (a + b) / 2.0
    if mean == 0.0:
        return None
    return abs(a - b) / mean * 100.0


@dataclass(frozen=True)
class DuplicateCheck:
    """A field duplicate compared with its primary bottle for one analyte."""

    stop_id: str
    site_id: str
    analyte: str
    primary_label: str | None
    duplicate_label: str
    primary_value: float | None
    duplicate_value: float | None
    rpd_percent: float | None
    limit_percent: float
    status: str  # "agrees", "disagrees", "waiting" (a result missing), "unpaired"
    flags: list[Flag] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        return {
            "stop_id": self.stop_id,
            "site_id": self.site_id,
            "analyte": self.analyte,
            "primary_label": self.primary_label,
            "duplicate_label": self.duplicate_label,
            "primary_value": self.primary_value,
            "duplicate_value": self.duplicate_value,
            "rpd_percent": self.rpd_percent,
            "limit_percent": self.limit_percent,
            "status": self.status,
            "flags": [f.to_dict() for f in self.flags],
        }


def _dup_analyte(b: Bottle) -> str:
    """Which analysis a duplicate bottle belongs to: its results' analyte, else by fixing."""
    for r in reversed(b.lab_results):
        if analyte_key(r.analyte) in (
            analyte_key(WINKLER_ANALYTE),
            analyte_key(BOD_ANALYTE),
            analyte_key(CBOD_ANALYTE),
        ):
            return analyte_key(r.analyte)
    return analyte_key(WINKLER_ANALYTE) if b.fixed_at is not None else analyte_key(BOD_ANALYTE)


#: The analysis behind each holding time of core.science.holding.HOLDING_TIMES that bottles follow.
_ANALYTE_OF_HOLDING = {"do_winkler": WINKLER_ANALYTE, "bod": BOD_ANALYTE}


def _duplicated_kind(b: Bottle, stop_bottles: Iterable[Bottle]) -> str | None:
    """The kind of bottle a duplicate duplicates: its ``duplicate_of`` bottle at the stop, else the
    analysis its results are for; None when neither tells (its fixing then decides)."""
    named = getattr(b, "duplicate_of", None) or (b.model_extra or {}).get("duplicate_of")
    if named:
        for other in stop_bottles:
            if other.label == named and other.id != b.id and other.kind != "duplicate":
                return other.kind
    for r in reversed(b.lab_results):
        if analyte_key(r.analyte) == analyte_key(WINKLER_ANALYTE):
            return "do-fixed"
        if analyte_key(r.analyte) == analyte_key(BOD_ANALYTE):
            return "bod"
    return None


def bottle_analysis(b: Bottle, stop_bottles: Iterable[Bottle] = ()) -> tuple[str, str] | None:
    """The analysis a bottle waits for, as ``(analyte, holding-time kind)``; None for a blank.

    The holding kind comes from core.science.holding's one table (:func:`bottle_holding_kind`):
    do-fixed → Winkler DO ("do_winkler"); bod → BOD5 ("bod"); a duplicate follows the bottle it
    duplicates (its ``duplicate_of`` among `stop_bottles`, the bottles of its stop, else its
    results' analysis), else its fixing.
    """
    duplicates = _duplicated_kind(b, stop_bottles) if b.kind == "duplicate" else None
    kind = bottle_holding_kind(b.kind, duplicates=duplicates, fixed=b.fixed_at is not None)
    return None if kind is None else (_ANALYTE_OF_HOLDING[kind], kind)


def bottle_clock(
    b: Bottle, now: datetime, *, stop_bottles: Iterable[Bottle] = (), overrides: dict[str, float] | None = None
) -> HoldingClock | None:
    """A bottle's holding clock while it waits for the bench, or None when no clock runs.

    The one rule the app (Bottles and End screens), ``streamtab lab pending`` and QC share. No
    clock runs for a bottle with no holding time (a blank), for one with a valid result for its
    analysis (whether it was in time is that result's own flag, never "expired" on the bottle), or
    for one collected after `now`. The clock runs from the time its rule says (core.science.holding:
    collection for every rule there; a fixing time is passed only when it is at or after collection).
    An invalid result leaves the clock running: the bottle still waits for a result that counts.

    Raises
    ------
    ValueError
        A bad holding-time override (see :func:`core.science.holding.holding_clock`).
    """
    pair = bottle_analysis(b, stop_bottles)
    if pair is None or b.collected_at > now:
        return None
    analyte, kind = pair
    result = current_result(b, analyte)
    if analyte == BOD_ANALYTE and result is None:
        result = current_result(b, CBOD_ANALYTE)  # the bottle went to CBOD5 instead: analysed
    if result is not None and result.valid is not False:
        return None
    return _clock_of(b, kind, now, overrides)


def bottle_holding_clock(
    b: Bottle, at: datetime, *, stop_bottles: Iterable[Bottle] = (), overrides: dict[str, float] | None = None
) -> HoldingClock | None:
    """A bottle's holding clock read at `at` whatever its results (None for a blank): the deadline
    for a report or custody page, or whether a result analysed at `at` was in time.

    Same analysis (duplicates follow `stop_bottles`) and same start as :func:`bottle_clock`.

    Raises
    ------
    ValueError
        `at` before collection, or a bad holding-time override
        (see :func:`core.science.holding.holding_clock`).
    """
    pair = bottle_analysis(b, stop_bottles)
    return None if pair is None else _clock_of(b, pair[1], at, overrides)


def _clock_of(b: Bottle, kind: str, at: datetime, overrides: dict[str, float] | None) -> HoldingClock:
    """The one place that says which times a bottle's clock is given: a fixing time only for a
    Winkler bottle and only when it is at or after collection."""
    fixed = b.fixed_at if (kind == "do_winkler" and b.fixed_at is not None and b.fixed_at >= b.collected_at) else None
    return holding_clock(kind, b.collected_at, at, fixed_at=fixed, overrides=overrides or None)


def duplicate_checks(trip: Trip, settings: LabSettings | None = None) -> list[DuplicateCheck]:
    """Each field duplicate of `trip` against its primary bottle at the same stop.

    The primary is the bottle named by the duplicate's ``duplicate_of`` field (a label) when
    present, else the one bottle of the matching kind (do-fixed for Winkler, bod for BOD5) at the
    same stop. The live results (not superseded) are compared by
    relative percent difference against ``settings.duplicate_rpd_percent`` [common practice].
    """
    settings = settings or LabSettings()
    limit = settings.duplicate_rpd_percent
    out: list[DuplicateCheck] = []
    for stop in sorted(trip.stops, key=lambda s: s.arrived_at):
        for dup in (b for b in stop.bottles if b.kind == "duplicate"):
            analyte = _dup_analyte(dup)
            primary_kind = "do-fixed" if analyte == analyte_key(WINKLER_ANALYTE) else "bod"
            named = dup.duplicate_of
            if named:
                cands = [b for b in stop.bottles if b.label == named and b.id != dup.id]
            else:
                cands = [b for b in stop.bottles if b.kind == primary_kind]
            dres = current_result(dup, analyte)
            dval = dres.value if dres is not None else None
            if len(cands) != 1:
                why = (
                    f"names {named}, which is not at this stop"
                    if named
                    else f"has {len(cands)} {primary_kind} bottles at this stop"
                    if cands
                    else f"has no {primary_kind} bottle at this stop"
                )
                out.append(
                    DuplicateCheck(
                        stop.id,
                        stop.site_id,
                        analyte,
                        None,
                        dup.label,
                        None,
                        dval,
                        None,
                        limit,
                        "unpaired",
                        [
                            _flag(
                                "lab.duplicate_unpaired",
                                Severity.WARNING,
                                f"Duplicate bottle {dup.label} cannot be paired: the stop {why}.",
                                "Record which bottle it duplicates (duplicate_of) or check the bottle kinds.",
                                "kind",
                            )
                        ],
                    )
                )
                continue
            prim = cands[0]
            pres = current_result(prim, analyte)
            pval = pres.value if pres is not None else None
            if pval is None or dval is None:
                out.append(
                    DuplicateCheck(
                        stop.id, stop.site_id, analyte, prim.label, dup.label, pval, dval, None, limit, "waiting"
                    )
                )
                continue
            rpd = relative_percent_difference(pval, dval)
            flags: list[Flag] = []
            status = "agrees"
            if rpd is not None and rpd > limit + 1e-9:
                status = "disagrees"
                flags.append(
                    _flag(
                        "lab.duplicate_rpd",
                        Severity.WARNING,
                        f"Bottle {prim.label} ({pval:.2f}) and its duplicate {dup.label} ({dval:.2f})"
                        f" differ by {rpd:.1f} %, more than the {limit:g} % limit.",
                        "Qualify both results as the program's QA plan says and review the sampling and bench records.",
                        "value",
                    )
                )
            if analyte == analyte_key(WINKLER_ANALYTE) and abs(pval - dval) > settings.duplicate_abs_mg_l + 1e-9:
                status = "disagrees"
                flags.append(
                    _flag(
                        "lab.duplicate_difference",
                        Severity.WARNING,
                        f"Bottle {prim.label} ({pval:.2f} mg/L) and its duplicate {dup.label}"
                        f" ({dval:.2f} mg/L) differ by {abs(pval - dval):.2f} mg/L, more than the"
                        f" {settings.duplicate_abs_mg_l:g} mg/L a field duplicate DO should agree within.",
                        "Qualify both results as the program's QA plan says; check the fixing (air"
                        " bubbles) and the titrations.",
                        "value",
                    )
                )
            out.append(
                DuplicateCheck(
                    stop.id, stop.site_id, analyte, prim.label, dup.label, pval, dval, rpd, limit, status, flags
                )
            )
    return out


# --------------------------------------------------------------------------------------------
# What is still waiting for the bench
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class PendingBottle:
    """A bottle still waiting for its lab result, with its holding clock."""

    trip_id: str
    program: str
    stop_id: str
    site_id: str
    bottle_id: str
    label: str
    kind: str
    analyte: str
    collected_at: datetime
    fixed_at: datetime | None
    clock_from: str
    deadline: datetime
    remaining_s: float
    expired: bool
    status: str  # "expired", "soon", "in time"
    hours: float
    citation: str
    flag: Flag | None

    def to_dict(self) -> dict[str, Any]:
        return {
            "trip_id": self.trip_id,
            "program": self.program,
            "stop_id": self.stop_id,
            "site_id": self.site_id,
            "bottle_id": self.bottle_id,
            "label": self.label,
            "kind": self.kind,
            "analyte": self.analyte,
            "collected_at": self.collected_at.isoformat(),
            "fixed_at": self.fixed_at.isoformat() if self.fixed_at else None,
            "clock_from": self.clock_from,
            "deadline": self.deadline.isoformat(),
            "remaining_s": self.remaining_s,
            "expired": self.expired,
            "status": self.status,
            "holding_hours": self.hours,
            "citation": self.citation,
            "flag": None if self.flag is None else self.flag.to_dict(),
        }


def pending_bottles(trips: Iterable[Trip], now: datetime, settings: LabSettings | None = None) -> list[PendingBottle]:
    """Every do-fixed, bod and duplicate bottle without a live result, most urgent first.

    Order: bottles still in time by time left (least first), then expired ones (most recently
    expired first) — the ones that can still be saved come before the ones that need a decision.
    Blank bottles are left out (no analysis is defined for them here), and so are bottles collected
    after `now` (when the clocks are read at an earlier time).
    """
    settings = settings or LabSettings()
    _aware(now, "now")
    out: list[PendingBottle] = []
    for trip in trips:
        for stop in trip.stops:
            for b in stop.bottles:
                try:
                    clock = bottle_clock(b, now, stop_bottles=stop.bottles, overrides=settings.holding_overrides_h)
                except ValueError:
                    continue
                if clock is None:
                    continue
                analyte = _ANALYTE_OF_HOLDING[clock.kind]
                status = "expired" if clock.expired else ("soon" if clock.flag is not None else "in time")
                out.append(
                    PendingBottle(
                        trip.id,
                        trip.program,
                        stop.id,
                        stop.site_id,
                        b.id,
                        b.label,
                        b.kind,
                        analyte,
                        b.collected_at,
                        b.fixed_at,
                        clock.clock_from,
                        clock.deadline,
                        clock.remaining_s,
                        clock.expired,
                        status,
                        clock.rule.hours,
                        clock.rule.citation,
                        clock.flag,
                    )
                )
    out.sort(key=lambda p: (p.expired, p.remaining_s if not p.expired else -p.remaining_s, p.label))
    return out


# --------------------------------------------------------------------------------------------
# Bench batches: QC recorded once, applied to every bottle of the batch
# --------------------------------------------------------------------------------------------
def standardisation_of(batch: Any) -> Standardisation | None:
    """The batch's thiosulfate standardisation, or None when it has none."""
    if batch is None or batch.std_titrant_ml is None:
        return None
    return Standardisation(
        titrant_ml=batch.std_titrant_ml,
        standard_ml=batch.std_ml,
        standard_normality=batch.std_normality,
        standardised_at=batch.standardised_at,
    )


def batch_for(trip: Trip, bottle: Bottle) -> Any:
    """The latest bench batch of `trip` that covers `bottle` (None when none does)."""
    hits = [b for b in trip.lab_batches if bottle.id in b.bottle_ids]
    return hits[-1] if hits else None


def batch_qc(batch: Any, now: datetime, settings: LabSettings | None = None) -> dict[str, Any]:
    """The batch's QC in words and numbers: each check's value, verdict and flag; the titrant's age in days.

    Checks: dilution-water blank ≤ 0.20 mg/L and GGA 198 ± 30.5 mg/L (Standard Methods 5210 B,
    :mod:`core.science.bod`), seed uptake per mL from the seed controls, incubation 5 d ± 6 h, the
    thiosulfate normality from its bi-iodate standardisation and its age at `now` (a note past
    ``settings.standardisation_max_age_h``).
    """
    from core.science.bod import blank_check, gga_check, incubation_check, seed_uptake_per_ml
    from core.science.winkler import thiosulfate_normality

    settings = settings or LabSettings()
    out: dict[str, Any] = {"id": batch.id, "name": batch.name, "bottles": len(batch.bottle_ids), "checks": []}

    def check(name: str, value: Any, flag: Flag | None, shown: str) -> None:
        out["checks"].append(
            {
                "check": name,
                "value": value,
                "shown": shown,
                "verdict": "missing" if value is None else ("passes" if flag is None else "fails"),
                "flag": None if flag is None else flag.to_dict(),
            }
        )

    v = batch.blank_depletion_mg_l
    check(
        "dilution-water blank",
        v,
        None if v is None else blank_check(v),
        "not recorded" if v is None else f"{v:.2f} mg/L depletion",
    )
    v = batch.gga_bod_mg_l
    check(
        "glucose–glutamic acid",
        v,
        None if v is None else gga_check(v),
        "not recorded" if v is None else f"{v:.1f} mg/L",
    )
    if batch.seed_controls:
        try:
            s = float(seed_uptake_per_ml(batch.seed_controls))
            check("seed controls", s, None, f"{s:.3f} mg/L per mL of seed ({len(batch.seed_controls)} controls)")
        except ValueError as exc:
            check(
                "seed controls",
                None,
                _flag(
                    "lab.seed_controls",
                    Severity.WARNING,
                    str(exc).splitlines()[0],
                    "Check the seed control readings.",
                    "seed_controls",
                ),
                "no usable control",
            )
    if batch.incubation_start is not None and batch.incubation_end is not None:
        h = (batch.incubation_end - batch.incubation_start).total_seconds() / 3600.0
        check("incubation", h, incubation_check(batch.incubation_start, batch.incubation_end), _fmt_h(h))
    std = standardisation_of(batch)
    if std is not None:
        n = float(thiosulfate_normality(std.titrant_ml, std.standard_ml, std.standard_normality))
        out["normality"] = n
        age_flag = None
        if std.standardised_at is not None:
            age_h = (now - std.standardised_at).total_seconds() / 3600.0
            out["standardisation_age_days"] = age_h / 24.0
            if age_h > settings.standardisation_max_age_h:
                age_flag = _flag(
                    "lab.standardisation_old",
                    Severity.NOTE,
                    f"The thiosulfate was standardised {_fmt_h(age_h)} ago, more than the"
                    f" {settings.standardisation_max_age_h:g} h the lab's setting allows.",
                    "Standardise the titrant again and record the new normality.",
                    "standardised_at",
                )
            shown = f"{n:.4f} N, standardised {age_h / 24.0:.1f} days ago"
        else:
            shown = f"{n:.4f} N (no standardisation date)"
        check("thiosulfate standardisation", n, age_flag, shown)
    return out


def add_batch(
    trip: Trip,
    *,
    name: str,
    bottle_refs: Iterable[str],
    created_at: datetime,
    now: datetime,
    analyst: str = "",
    blank_depletion_mg_l: float | None = None,
    gga_bod_mg_l: float | None = None,
    seed_controls: list[dict] | None = None,
    incubation_start: datetime | None = None,
    incubation_end: datetime | None = None,
    incubator_temp_c: float | None = None,
    standardisation: Standardisation | None = None,
    notes: str = "",
) -> tuple[Trip, Any]:
    """The trip with a bench batch added (or replaced, by name): QC entered once for all its bottles.

    Raises :class:`LabInputError` naming the input: an empty name, no or unknown bottles, a bad QC
    value (the same ranges as :func:`record_bod` and :func:`record_winkler` accept).
    """
    from core.records.models import LabBatch
    from core.science.bod import blank_check, gga_check, seed_uptake_per_ml
    from core.science.winkler import thiosulfate_normality

    name = (name or "").strip()
    if not name or len(name) > 40:
        raise LabInputError("name", "batch name is empty or longer than 40 characters; accepted: e.g. B-0623")
    _aware(created_at, "created_at")
    _aware(now, "now")
    refs = [r.strip() for r in bottle_refs if r and r.strip()]
    if not refs:
        raise LabInputError("bottle", "the batch has no bottles; accepted: the labels of the bottles set up in it")
    ids: list[str] = []
    for ref in refs:
        _, b, _ = find_bottle(trip, ref)
        if b.id not in ids:
            ids.append(b.id)
    for value, field_, fn in (
        (blank_depletion_mg_l, "blank_depletion_mg_l", blank_check),
        (gga_bod_mg_l, "gga_bod_mg_l", gga_check),
    ):
        if value is not None:
            try:
                fn(value)
            except ValueError as exc:
                raise LabInputError(field_, str(exc).splitlines()[0]) from None
    if seed_controls:
        try:
            seed_uptake_per_ml(seed_controls)
        except ValueError as exc:
            raise LabInputError("seed_controls", f"seed_controls: {str(exc).splitlines()[0]}") from None
    if incubator_temp_c is not None:
        _num(incubator_temp_c, "incubator_temp_c", -10.0, 60.0, "°C")
    if (incubation_start is None) != (incubation_end is None):
        raise LabInputError(
            "incubation_start" if incubation_start is None else "incubation_end",
            "incubation start and end go together; accepted: both times or neither",
        )
    if incubation_start is not None and incubation_end is not None and incubation_end <= incubation_start:
        raise LabInputError(
            "incubation_end", "the incubation ends before it starts; accepted: a read-out after the set-up"
        )
    if standardisation is not None:
        try:
            thiosulfate_normality(
                standardisation.titrant_ml, standardisation.standard_ml, standardisation.standard_normality
            )
        except ValueError as exc:
            msg = str(exc).splitlines()[0]
            raise LabInputError("standardisation." + msg.split(" ", 1)[0], "standardisation " + msg) from None
        if standardisation.standardised_at is not None:
            _aware(standardisation.standardised_at, "standardised_at")
            if standardisation.standardised_at > now + timedelta(minutes=5):
                raise LabInputError(
                    "standardised_at", "the standardisation time is in the future; accepted: a time up to now"
                )
    batch = LabBatch(
        name=name,
        created_at=created_at,
        analyst=(analyst or "").strip()[:40],
        bottle_ids=ids,
        blank_depletion_mg_l=blank_depletion_mg_l,
        gga_bod_mg_l=gga_bod_mg_l,
        seed_controls=[{k: float(v) for k, v in c.items()} for c in (seed_controls or [])],
        incubation_start=incubation_start,
        incubation_end=incubation_end,
        incubator_temp_c=incubator_temp_c,
        std_titrant_ml=standardisation.titrant_ml if standardisation else None,
        std_ml=standardisation.standard_ml if standardisation else 20.0,
        std_normality=standardisation.standard_normality if standardisation else 0.025,
        standardised_at=standardisation.standardised_at if standardisation else None,
        notes=(notes or "").strip(),
    )
    kept = [b for b in trip.lab_batches if b.name != name]
    same = [b for b in trip.lab_batches if b.name == name]
    if same:
        batch = batch.model_copy(update={"id": same[0].id})
    return trip.model_copy(update={"lab_batches": kept + [batch]}), batch
