"""The lab mode's logic (no kivy): bottles waiting, Winkler with the day's standardisation, a BOD series as
typed, and signing hand-offs. The bench and signature screens forward to it; it calls core and the store."""

from __future__ import annotations

import re
from collections.abc import Callable
from dataclasses import dataclass
from datetime import datetime, timezone
from typing import Any

from mobile.app.views import fmt_duration

__all__ = ["LabBench", "WaitingRow", "DilutionLine", "utc_now"]


def utc_now() -> datetime:
    return datetime.now(timezone.utc)


#: The bench's inputs in the screen's words; a refusal from the lab rules ("analysed_at = ...") is shown with them.
BENCH_WORDS = {
    "analysed_at": "the time of analysis (this tablet's clock)",
    "standardised_at": "the standardisation time",
    "titrant_ml": "titrant used",
    "titrated_ml": "volume titrated",
    "bottle_ml": "bottle volume",
    "reagents_ml": "fixing reagents",
    "sample_ml": "sample volume",
    "seed_ml": "seed volume",
    "initial_do_mg_l": "initial DO",
    "final_do_mg_l": "day-5 DO",
}


def in_words(message: str) -> str:
    """A lab-rule refusal with every input named as the bench screen names it."""
    for name, words in BENCH_WORDS.items():
        message = re.sub(rf"(?<![\w-]){re.escape(name)}(?: = |(?!\w))", words + " ", message)
    message = message.replace("  ", " ").replace(" ;", ";").replace(" )", ")").rstrip()
    return message[:1].upper() + message[1:]


@dataclass(frozen=True)
class WaitingRow:
    """A bottle waiting for the bench, as the list shows it."""

    trip_id: str
    bottle_id: str
    label: str
    analysis: str
    site_id: str
    text: str
    expired: bool


@dataclass(frozen=True)
class DilutionLine:
    """One typed dilution: its BOD and whether it counts, in words."""

    text: str
    valid: bool | None


def _left(seconds: float) -> str:
    # the app's one way to say a duration; no-break spaces keep a number with its unit when the line wraps
    txt = fmt_duration(seconds).replace(" ", "\u00a0")
    return f"{txt} left" if seconds >= 0 else f"expired {txt} ago"


@dataclass(frozen=True)
class _Signed:
    trip: Any
    name: str


class LabBench:
    """Bench work on the trips of a device store. Every write goes through ``store.update_trip``."""

    STD_ML = 20.0
    STD_N = 0.025

    def __init__(
        self,
        store: Any,
        *,
        now: Callable[[], datetime] = utc_now,
        before_write: Callable[[], None] | None = None,
        after_write: Callable[[str], None] | None = None,
    ) -> None:
        self.store = store
        self.now = now
        self.before_write = before_write or (lambda: None)
        self.after_write = after_write or (lambda _trip_id: None)
        self.standardisation: Any = None

    # ---------------------------------------------------------------- reading what was typed
    @staticmethod
    def _number(text: str, label: str, lo: float, hi: float, unit: str) -> float:
        from core.records.models import InputError, parse_number

        try:
            v = parse_number((text or "").strip(), label)
        except InputError:
            raise ValueError(
                f"{label}: “{text}” is not a number; type digits such as 8.75 (a decimal comma is fine)."
            ) from None
        if not lo <= v <= hi:
            raise ValueError(f"{label}: {v:g} {unit} is outside {lo:g}–{hi:g} {unit}.")
        return v

    # ---------------------------------------------------------------- what is waiting
    def waiting(self) -> list[WaitingRow]:
        """Every bottle of every trip still waiting for a result, most urgent first."""
        from core.rules.lab import WINKLER_ANALYTE, pending_bottles
        from core.store import StoreError

        trips = []
        for s in self.store.list_trips():
            try:
                trips.append(self.store.load_trip(s.id))
            except StoreError:
                continue
        out = []
        for p in pending_bottles(trips, self.now()):
            what = "Winkler DO" if p.analyte == WINKLER_ANALYTE else "BOD5"
            out.append(
                WaitingRow(
                    p.trip_id,
                    p.bottle_id,
                    p.label,
                    what,
                    p.site_id,
                    f"{p.label} · {what} · {p.site_id} · {_left(p.remaining_s)}",
                    p.expired,
                )
            )
        return out

    # ---------------------------------------------------------------- the day's standardisation
    def set_standardisation(self, titrant_text: str) -> str:
        """Records today's bi-iodate standardisation (20 mL of 0.025 N) from the titrant used, mL."""
        from core.rules.lab import Standardisation

        ml = self._number(titrant_text, "Thiosulfate on the standard", 0.1, 100.0, "mL")
        self.standardisation = Standardisation(
            titrant_ml=ml, standard_ml=self.STD_ML, standard_normality=self.STD_N, standardised_at=self.now()
        )
        return self.standardisation_text()

    def standardisation_text(self) -> str:
        from core.science.winkler import thiosulfate_normality

        s = self.standardisation
        if s is None:
            return "No standardisation today: titrate 20 mL of 0.025 N bi-iodate and type the thiosulfate used."
        n = float(thiosulfate_normality(s.titrant_ml, s.standard_ml, s.standard_normality))
        age_h = (self.now() - s.standardised_at).total_seconds() / 3600.0
        age = f"{age_h * 60:.0f} min" if age_h < 1 else (f"{age_h:.1f} h" if age_h < 48 else f"{age_h / 24:.1f} days")
        return f"Titrant {n:.4f} N ({s.titrant_ml:g} mL on 20 mL of 0.025 N bi-iodate), standardised {age} ago."

    # ---------------------------------------------------------------- writing
    def _write(self, trip_id: str, record: Callable[[Any], Any], change: Callable[[Any], str]) -> Any:
        """Read–modify–write of one trip through ``store.update_trip``: the field form's queued
        saves go first, so the trip read is the latest and no other writer comes between.
        `record(trip)` returns the lab outcome (its ``.trip`` is written); a LabInputError from it
        becomes the ValueError the screen shows and nothing is written."""
        from core.rules.lab import LabInputError
        from core.store import StoreError

        self.before_write()
        said: dict[str, Any] = {}

        def apply(trip: Any) -> Any:
            said["out"] = record(trip)
            return said["out"].trip

        try:
            saved = self.store.update_trip(trip_id, lambda: change(said["out"]), apply)
        except LabInputError as exc:
            raise ValueError(in_words(exc.message)) from None
        except StoreError as exc:
            raise ValueError(f"Not saved: {exc}") from None
        self.after_write(saved.id)
        return said["out"]

    def winkler(self, trip_id: str, bottle_id: str, titrant_text: str, titrated_text: str, analyst: str = "") -> str:
        """Records a titration with today's standardisation; returns the sentence the screen shows."""
        from core.rules.lab import record_winkler

        if self.standardisation is None:
            raise ValueError("Record today's thiosulfate standardisation first.")
        titrant = self._number(titrant_text, "Titrant used", 0.0, 100.0, "mL")
        titrated = self._number(titrated_text, "Volume titrated", 1.0, 300.0, "mL")
        std, at = self.standardisation, self.now()
        out = self._write(
            trip_id,
            lambda trip: record_winkler(
                trip,
                bottle_id,
                titrant_ml=titrant,
                titrated_ml=titrated,
                standardisation=std,
                analysed_at=at,
                now=at,
                analyst=analyst,
            ),
            lambda o: f"lab: Winkler DO {o.result.value:.2f} mg/L on bottle {o.bottle.label} (bench)",
        )
        worst = [f for f in out.flags if f.severity.value != "note"]
        return f"{out.bottle.label}: Winkler DO {out.result.value:.2f} mg/L saved." + (
            f" {worst[0].message}" if worst else ""
        )

    # ---------------------------------------------------------------- a BOD series as typed
    def bod_lines(self, rows: list[tuple[str, str, str, str]]) -> tuple[list[DilutionLine], str, list[dict]]:
        """Each typed row (sample mL, bottle mL, initial DO, day-5 DO) in words, the reportable
        result so far, and the dilutions that can be recorded. Empty rows are skipped."""
        from core.science.bod import bod_dilution, bod_from_dilutions

        lines: list[DilutionLine] = []
        good: list[dict] = []
        for sample, bottle, d1, d2 in rows:
            if not any(x.strip() for x in (sample, d1, d2)):
                lines.append(DilutionLine("", None))
                continue
            try:
                d = {
                    "sample_ml": self._number(sample, "Sample", 0.1, 300.0, "mL"),
                    "bottle_ml": self._number(bottle or "300", "Bottle", 1.0, 2000.0, "mL"),
                    "initial_do_mg_l": self._number(d1, "Initial DO", 0.0, 20.0, "mg/L"),
                    "final_do_mg_l": self._number(d2, "Day-5 DO", 0.0, 20.0, "mg/L"),
                }
                r = bod_dilution(**d)
            except ValueError as exc:
                lines.append(DilutionLine(str(exc).splitlines()[0], None))
                continue
            why = "" if r.valid else " — " + (r.flags[0].message if r.flags else "does not count")
            lines.append(
                DilutionLine(
                    f"{r.bod_mg_l:.1f} mg/L, depletion {r.depletion_mg_l:.2f} mg/L,"
                    f" {'counts' if r.valid else 'does not count'}{why}",
                    r.valid,
                )
            )
            good.append(d)
        if not good:
            return lines, "Reportable BOD5: type a dilution.", good
        res = bod_from_dilutions(good)
        # The reportable result by the Standard Methods 5210 B rules, bounds included ("< 2.0 mg/L").
        shown = (
            res.report.text
            if res.report is not None
            else ("no valid dilution" if res.bod_mg_l is None else f"{res.bod_mg_l:.1f} mg/L")
        )
        return lines, f"Reportable BOD5: {shown}", good

    def bod(self, trip_id: str, bottle_id: str, rows: list[tuple[str, str, str, str]], analyst: str = "") -> str:
        from core.rules.lab import batch_for, find_bottle, record_bod, reported_bod

        _, _, good = self.bod_lines(rows)
        if not good:
            raise ValueError("Type at least one dilution (sample mL, initial DO and day-5 DO).")
        at = self.now()

        def record(trip: Any) -> Any:
            _, bottle, _ = find_bottle(trip, bottle_id)
            return record_bod(
                trip, bottle_id, dilutions=good, analysed_at=at, now=at, analyst=analyst, batch=batch_for(trip, bottle)
            )

        out = self._write(trip_id, record, lambda o: f"lab: BOD5 on bottle {o.bottle.label} (bench)")
        rep = reported_bod(out.result)
        shown = (
            rep.text
            if rep is not None
            else ("no valid dilution" if out.result.value is None else f"{out.result.value:.1f} mg/L")
        )
        return f"{out.bottle.label}: BOD5 {shown} saved."

    # ---------------------------------------------------------------- signing hand-offs
    def unsigned(self, trip_id: str) -> list[tuple[str, str, str]]:
        """(record id, role, sentence) for each side of a hand-off still to be signed, in time order."""
        trip = self.store.load_trip(trip_id)
        out = []
        for r in sorted(trip.custody, key=lambda r: r.at):
            for role, name, sig in (
                ("relinquished", r.relinquished_by, r.relinquished_signature),
                ("received", r.received_by, r.received_signature),
            ):
                if sig is None:
                    out.append(
                        (
                            r.id,
                            role,
                            f"{name} ({role} by) — {r.relinquished_by} → {r.received_by}, {r.at:%Y-%m-%d %H:%M}",
                        )
                    )
        return out

    def sign(self, trip_id: str, record_id: str, role: str, strokes: list[list[list[float]]], aspect: float) -> str:
        from core.records.models import Signature
        from core.rules.custody import CustodyInputError, sign_handoff

        pts = sum(len(s) for s in strokes)
        if pts < 5:
            raise ValueError("Sign in the box with a finger first.")
        clean = [[[round(min(max(x, 0.0), 1.0), 4), round(min(max(y, 0.0), 1.0), 4)] for x, y in s] for s in strokes]
        at = self.now()

        def record(trip: Any) -> Any:
            rec = next((r for r in trip.custody if r.id == record_id), None)
            if rec is None:
                raise ValueError("That hand-off is no longer on the trip; go back and pick it again.")
            name = rec.relinquished_by if role == "relinquished" else rec.received_by
            try:
                sig = Signature(name=name, signed_at=at, aspect=aspect, strokes=clean)
                return _Signed(sign_handoff(trip, record_id, role, sig), name)
            except (CustodyInputError, ValueError) as exc:
                raise ValueError(str(exc).splitlines()[0]) from None

        out = self._write(trip_id, record, lambda o: f"custody: {o.name} signed ({role} by) on the tablet")
        return f"{out.name}'s signature is saved with the hand-off."
