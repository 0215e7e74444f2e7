"""What a filed trip report and the office tables say: rows in words and numbers, no layout.

Pure: a Trip, the sites, the program settings and ``now`` in, plain rows out. The PDF
(`mobile.paper.report_pdf`), the season tables (`mobile.paper.season`) and the plots read these
rows, so a result's status, qualifier and holding verdict are decided here once.

A result's ``status`` is one of:

=======================  =============================================================
``superseded``           a later result of the same analyte on the bottle replaced it
``not valid``            the bench rules found it unusable (``valid`` is False)
``past holding time``    analysed (Winkler) or set up (BOD) after its holding time
``valid``                checked and usable
``not checked``          entered without the bench rules (``valid`` is None)
=======================  =============================================================
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterable
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

from core.records.models import Bottle, LabResult, ProgramSettings, Site, Stop, Trip
from core.timefmt import when_text

__all__ = [
    "Rounding",
    "Reported",
    "ROUNDED_QUANTITIES",
    "ResultRow",
    "StopRow",
    "BottleRow",
    "HandoffRow",
    "PlotPoint",
    "TripReport",
    "WADING_CAUTION",
    "DECIDES",
    "rounding_for",
    "result_status",
    "for_export",
    "reported",
    "rounding_note",
    "result_quantity",
    "result_rows",
    "stop_rows",
    "bottle_rows",
    "handoff_rows",
    "plot_points",
    "trip_report",
    "criterion_mg_l",
    "fmt_number",
    "typed",
    "analyte_text",
    "kind_text",
    "severity_text",
    "finding_text",
    "bottle_names",
]

#: The one wading caution, shown by the app and printed in every report.
WADING_CAUTION = (
    "Wading: enter the water only where your program's SOP allows — never alone, "
    "never in fast or rising water, wearing a PFD where required."
)
#: The line every printed report carries.
DECIDES = (
    "This report informs; it does not judge water safe or unsafe for aquatic life. The program's SOP,"
    " its QA plan and local regulations decide how these values are used and reported."
)


@dataclass(frozen=True)
class Rounding:
    """How many decimals values are shown with (never applied to stored values).

    Defaults: DO 0.1 mg/L shown (0.01 stored), % saturation whole, temperature 0.1 °C, pressure
    0.1 hPa, specific conductance 3 significant figures, practical salinity 0.01, BOD5 0.1 mg/L,
    calibration readings, targets and differences 0.01 mg/L (they are judged against a 0.2 mg/L
    tolerance, so 0.1 would hide the verdict) [common practice]. A program sets its own in its
    settings as ``reporting_decimals`` ({"do_mg_l": 2, ...}). The printed report and the exports
    people read (trip CSV, season tables) all round through :func:`reported`; an export asked for
    full precision writes stored values.
    """

    do_mg_l: int = 1
    percent: int = 0
    temp_c: int = 1
    pressure_hpa: int = 1
    conductivity_sig: int = 3
    salinity: int = 2
    bod_mg_l: int = 1
    calibration_mg_l: int = 2


#: What :func:`reported` rounds: each name is a quantity; "conductivity" goes by significant figures
#: (conductivity and specific conductance alike), the rest by decimals (the `Rounding` field of that name).
ROUNDED_QUANTITIES = (
    "do_mg_l",
    "percent",
    "temp_c",
    "pressure_hpa",
    "conductivity",
    "salinity",
    "bod_mg_l",
    "calibration_mg_l",
)


def rounding_for(settings: ProgramSettings | None) -> Rounding:
    """The program's reporting decimals (ProgramSettings.reporting_decimals), else the defaults."""
    given = dict(settings.reporting_decimals) if settings is not None else {}
    known = {
        k: int(v)
        for k, v in given.items()
        if k in Rounding.__dataclass_fields__ and isinstance(v, int) and not isinstance(v, bool) and 0 <= v <= 6
    }
    return Rounding(**known)


@dataclass(frozen=True)
class Reported:
    """A stored value rounded for a reader: the rounded number (an int when no decimal is shown), its text
    with the zeros the convention keeps ("9.40" at two decimals) and the decimals shown (negative: tens,
    hundreds). A CSV writes the text; a workbook writes the number with that many decimals on show."""

    number: float | int
    text: str
    decimals: int

    def __str__(self) -> str:
        return self.text


def _places(value: float, quantity: str, rounding: Rounding) -> int:
    if quantity == "conductivity":
        if value == 0:
            return 0
        return rounding.conductivity_sig - 1 - math.floor(math.log10(abs(value)))
    if quantity not in ROUNDED_QUANTITIES:
        raise ValueError(f"no reporting rule for {quantity!r}; one of {', '.join(ROUNDED_QUANTITIES)}")
    return int(getattr(rounding, quantity))


def reported(value: float | None, quantity: str, rounding: Rounding) -> Reported | None:
    """`value` rounded by the reporting rule for `quantity` (one of :data:`ROUNDED_QUANTITIES`); None stays None.

    The one rounding rule of the printed report and the exports; stored values are never changed.
    """
    if value is None or not math.isfinite(value):
        return None
    places = _places(value, quantity, rounding)
    number: float | int = round(value, places)
    if places <= 0:
        number = int(number)
    elif number == 0:
        number = 0.0  # never "-0.0"
    return Reported(number, f"{number:.{max(0, places)}f}", places)


def for_export(value: float | None, quantity: str, rounding: Rounding | None) -> Reported | float | None:
    """An exported cell: `value` rounded by :func:`reported`, or as stored when `rounding` is None
    (an export asked for full precision)."""
    if rounding is None or value is None:
        return value
    return reported(value, quantity, rounding)


def rounding_note(rounding: Rounding | None) -> str:
    """The convention an export used, in words, for its ``rounding`` column."""
    if rounding is None:
        return "full precision as stored"

    def step(d: int, unit: str) -> str:
        return (f"{10**-d:.{d}f}" if d > 0 else "1") + (f" {unit}" if unit else "")

    return (
        f"reported: DO {step(rounding.do_mg_l, 'mg/L')}; saturation {step(rounding.percent, '%')};"
        f" temperature {step(rounding.temp_c, '°C')}; pressure {step(rounding.pressure_hpa, 'hPa')};"
        f" conductivity {rounding.conductivity_sig} significant figures; salinity {step(rounding.salinity, '')};"
        f" BOD5 {step(rounding.bod_mg_l, 'mg/L')}; calibration {step(rounding.calibration_mg_l, 'mg/L')}"
    )


def result_quantity(analyte: str, unit: str) -> str | None:
    """The reporting rule of a lab result: "bod_mg_l" for BOD5/CBOD5, "do_mg_l" for other mg/L results;
    None (no rounding rule) for a result in another unit."""
    from core.rules.lab import BOD_ANALYTE, CBOD_ANALYTE, analyte_key

    if unit not in ("mg/L", "mg/l"):
        return None
    return "bod_mg_l" if analyte_key(analyte) in (BOD_ANALYTE, CBOD_ANALYTE) else "do_mg_l"


#: Analytes as a reader names them (the stored names are machine names; see core.rules.lab).
_ANALYTE_WORDS = {"do_winkler": "DO (Winkler)", "bod5": "BOD5", "cbod5": "CBOD5"}
#: Bottle kinds as a reader names them.
_KIND_WORDS = {
    "do-fixed": "DO, fixed on site",
    "bod": "BOD, chilled",
    "duplicate": "field duplicate",
    "blank": "blank",
}
_SEVERITY_WORDS = {"note": "Note", "warning": "Warning", "stop-and-check": "Stop and check"}


def analyte_text(analyte: str) -> str:
    """A lab result's analyte in words ("DO (Winkler)", "BOD5"); an analyte we do not know, as stored."""
    from core.rules.lab import analyte_key

    return _ANALYTE_WORDS.get(analyte_key(analyte), analyte)


def kind_text(kind: str) -> str:
    """A bottle's kind in words ("DO, fixed on site", "BOD, chilled")."""
    return _KIND_WORDS.get(kind, kind)


def severity_text(severity: Any) -> str:
    """A finding's severity in words: "Note", "Warning", "Stop and check"."""
    value = getattr(severity, "value", severity)
    return _SEVERITY_WORDS.get(str(value), str(value))


_ISO_TIME = re.compile(r"\b\d{4}-\d\d-\d\dT\d\d:\d\d(?::\d\d(?:\.\d+)?)?(?:Z|[+-]\d\d:\d\d)")


def _readable_times(text: str) -> str:
    """ISO 8601 times inside a stored message ("2026-06-30T16:55-07:00") as people read them
    ("2026-06-30 16:55 UTC−07:00"); a time that does not parse stays as it is."""

    def one(m: re.Match[str]) -> str:
        try:
            return when_text(datetime.fromisoformat(m.group(0).replace("Z", "+00:00")))
        except ValueError:
            return m.group(0)

    return _ISO_TIME.sub(one, text)


def finding_text(flag: Any) -> str:
    """A finding as a reader sees it: severity, what was found and what to do, in words (never its code),
    its times with their zone as people write them."""
    action = f" {flag.action}" if getattr(flag, "action", "") else ""
    return _readable_times(f"{severity_text(flag.severity)}: {flag.message}{action}")


def bottle_names(trip: Trip) -> dict[str, str]:
    """Bottle id → the name a reader finds it by: its label, with its site when two bottles of the
    trip carry the same label ("TV-0701 at LK-04")."""
    from collections import Counter

    counts = Counter(b.label for s in trip.stops for b in s.bottles)
    return {
        b.id: (f"{b.label} at {s.site_id}" if counts[b.label] > 1 else b.label) for s in trip.stops for b in s.bottles
    }


def fmt_number(value: float | None, decimals: int) -> str:
    """A value rounded for a reader ("—" when missing)."""
    if value is None or not math.isfinite(value):
        return "—"
    return f"{value:.{decimals}f}"


def _sig(value: float | None, digits: int) -> str:
    r = reported(value, "conductivity", Rounding(conductivity_sig=digits))
    return "—" if r is None else r.text


def criterion_mg_l(site: Site | None, settings: ProgramSettings) -> float | None:
    """The DO criterion (mg/L) the program applies at a site; None when the site has no water class."""
    if site is None:
        return None
    if site.min_do_mg_l is not None:
        return site.min_do_mg_l
    if site.water_class == "cold":
        return settings.cold_min_mg_l
    if site.water_class == "warm":
        return settings.warm_min_mg_l
    return None


# --------------------------------------------------------------------------------------------
# Lab results
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class ResultRow:
    """One lab result as a reader sees it."""

    stop_id: str
    site_id: str
    bottle_id: str
    label: str
    kind: str
    result_id: str
    analyte: str
    value: float | None
    qualifier: str  # "<", ">" or ""
    reported: str  # "< 2.0 mg/L", "9.4 mg/L", "no value"
    unit: str
    status: str
    holding: str  # "in time", "past holding time", "not known"
    analyst: str
    analysed_at: datetime | None
    method: str
    superseded_by: str | None
    flag_codes: list[str] = field(default_factory=list)
    notes: str = ""
    findings: list[str] = field(default_factory=list)  # the bench's findings in words (finding_text)

    def to_dict(self) -> dict[str, Any]:
        return {
            "stop_id": self.stop_id,
            "site_id": self.site_id,
            "bottle_id": self.bottle_id,
            "label": self.label,
            "kind": self.kind,
            "result_id": self.result_id,
            "analyte": self.analyte,
            "value": self.value,
            "qualifier": self.qualifier,
            "reported": self.reported,
            "unit": self.unit,
            "status": self.status,
            "holding": self.holding,
            "analyst": self.analyst,
            "analysed_at": self.analysed_at.isoformat() if self.analysed_at else None,
            "method": self.method,
            "superseded_by": self.superseded_by,
            "flags": list(self.flag_codes),
            "notes": self.notes,
        }


def _holding(
    bottle: Bottle, result: LabResult, settings: ProgramSettings | None, stop_bottles: Iterable[Bottle] = ()
) -> str:
    from core.rules.lab import analyte_key, bottle_analysis, bottle_holding_clock

    derived = (result.inputs or {}).get("derived") or {}
    hold = derived.get("holding")
    if (
        isinstance(hold, dict)
        and isinstance(hold.get("held_h"), (int, float))
        and isinstance(hold.get("limit_h"), (int, float))
    ):
        return "past holding time" if hold["held_h"] > hold["limit_h"] else "in time"
    pair = bottle_analysis(bottle, stop_bottles)
    if pair is None or result.analysed_at is None or analyte_key(result.analyte) != analyte_key(pair[0]):
        return "not known"
    if pair[1] == "bod":
        return "not known"  # the set-up time decides, and it was not recorded with this result
    try:
        clock = bottle_holding_clock(
            bottle,
            result.analysed_at,
            stop_bottles=stop_bottles,
            overrides=settings.holding_overrides_h if settings else None,
        )
    except ValueError:
        return "not known"
    return "not known" if clock is None else ("past holding time" if clock.expired else "in time")


def _reported(result: LabResult, rounding: Rounding) -> tuple[float | None, str, str]:
    """(value, qualifier, text) of a result: the bench's own report when it carries one."""
    from core.rules.lab import reported_bod

    bod = reported_bod(result)  # BOD5/CBOD5 by the 5210 B reporting rules (inputs.derived.report)
    rep = bod.to_dict() if bod is not None else (result.inputs or {}).get("report")
    if isinstance(rep, dict) and isinstance(rep.get("text"), str) and rep["text"]:
        q = rep.get("qualifier") or ""
        v = rep.get("value")
        return (
            float(v) if isinstance(v, (int, float)) and not isinstance(v, bool) else result.value,
            q if q in ("<", ">") else "",
            rep["text"],
        )
    if result.value is None:
        return None, "", "no value"
    quantity = result_quantity(result.analyte, result.unit)
    shown = reported(result.value, quantity, rounding) if quantity else None
    text = shown.text if shown is not None else f"{result.value:.2f}"
    return result.value, "", f"{text} {result.unit}".strip()


def result_status(result: LabResult, holding: str = "") -> str:
    """How a result stands (the table in the module docstring); `holding` is its holding verdict."""
    if result.status == "superseded":
        return "superseded"
    if result.valid is False:
        return "not valid"
    if holding == "past holding time":
        return "past holding time"
    return "valid" if result.valid else "not checked"


def result_rows(trip: Trip, settings: ProgramSettings | None = None) -> list[ResultRow]:
    """Every lab result of the trip (superseded ones too), in route order then bottle order."""
    rounding = rounding_for(settings)
    rows: list[ResultRow] = []
    for stop in sorted(trip.stops, key=lambda s: s.arrived_at):
        for b in stop.bottles:
            for r in b.lab_results:
                holding = _holding(b, r, settings, stop.bottles)
                value, qualifier, text = _reported(r, rounding)
                flags = [f.code for f in r.flags]
                findings = list(dict.fromkeys(finding_text(f) for f in r.flags))
                rows.append(
                    ResultRow(
                        stop.id,
                        stop.site_id,
                        b.id,
                        b.label,
                        b.kind,
                        r.id,
                        r.analyte,
                        value,
                        qualifier,
                        text,
                        r.unit,
                        result_status(r, holding),
                        holding,
                        r.analyst,
                        r.analysed_at,
                        r.method,
                        r.superseded_by,
                        flags,
                        r.notes,
                        findings,
                    )
                )
    return rows


# --------------------------------------------------------------------------------------------
# The field sheet
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class StopRow:
    """One stop as entered, with what the store derived and every finding in words."""

    stop: Stop
    site_name: str
    temp_text: str
    pressure_text: str
    conductivity_text: str
    do_text: str
    do_mg_l: float | None
    do_sat_mg_l: float | None
    percent_saturation: float | None
    specific_conductance_us_cm: float | None
    criterion_mg_l: float | None
    shown: dict[str, str]
    flags: list[Any]


def typed(q, decimals: int = 1) -> str:
    """A reading as typed, with its unit; the normalised value beside it when the unit differs."""
    if q is None:
        return "—"
    text = q.text.strip()
    entered = q.entered_unit.strip()

    def key(u: str) -> str:
        return u.replace("°", "").replace("µ", "u").lower()

    if not any(ch.isalpha() or ch in "%°µ" for ch in text):
        text = f"{text} {q.unit if not entered or key(entered) == key(q.unit) else entered}"
    if entered and key(entered) != key(q.unit):
        return f"{text} (= {q.value:.{decimals}f} {q.unit})"
    return text


def _holding_findings(stop: Stop, settings: ProgramSettings, now: datetime, names: dict[str, str]) -> list[Any]:
    """The holding-time findings of a stop's bottles as a filed report words them: which bottle, its rule
    and its deadline with the deadline's zone; never "N days ago", which would change with the printing."""
    from core.flags import Flag
    from core.rules.lab import bottle_clock

    out = []
    for b in stop.bottles:
        try:
            clock = bottle_clock(b, now, stop_bottles=stop.bottles, overrides=settings.holding_overrides_h)
        except ValueError:
            continue  # a bad holding-time override: the settings' own check reports it
        if clock is None or clock.flag is None:
            continue
        name = names.get(b.id, b.label)
        rule = f"{clock.rule.hours:g} h from {clock.clock_from}"
        if clock.expired:
            message = (
                f"Bottle {name} ({clock.rule.label}) has no valid result on record, and its holding time"
                f" ({rule}) ended {when_text(clock.deadline)}, before this report was printed."
            )
        else:
            message = (
                f"Bottle {name} ({clock.rule.label}) has no valid result on record yet; its holding time"
                f" ({rule}) ends {when_text(clock.deadline)}."
            )
        out.append(Flag(clock.flag.code, clock.flag.severity, message, clock.flag.action, clock.flag.field))
    return out


def stop_rows(trip: Trip, sites: dict[str, Site], settings: ProgramSettings, now: datetime) -> list[StopRow]:
    """The trip's stops in route order, as the field sheet prints them. Holding-time findings name the
    bottle and its deadline (:func:`_holding_findings`) instead of the QC's time since the deadline."""
    from core.flags import Severity
    from core.rules.lab import stop_do_mg_l
    from core.rules.qc import trip_flags

    rounding = rounding_for(settings)
    flags = trip_flags(trip, settings, now, sites=sites)
    names = bottle_names(trip)
    out: list[StopRow] = []
    for s in sorted(trip.stops, key=lambda s: s.arrived_at):
        d = s.derived
        site = sites.get(s.site_id)
        do_mg = stop_do_mg_l(s)
        shown = {
            "temp": "—" if s.temp is None else f"{s.temp.value:.{rounding.temp_c}f} °C",
            "pressure": "—" if s.pressure is None else f"{s.pressure.value:.{rounding.pressure_hpa}f} hPa",
            "do_mg_l": fmt_number(do_mg, rounding.do_mg_l),
            "do_sat_mg_l": fmt_number(d.do_sat_mg_l if d else None, rounding.do_mg_l),
            "percent_saturation": fmt_number(d.percent_saturation if d else None, rounding.percent),
            "sc25": _sig(d.specific_conductance_us_cm if d else None, rounding.conductivity_sig),
        }
        out.append(
            StopRow(
                s,
                site.name if site else "(site not in the site list)",
                typed(s.temp, rounding.temp_c),
                typed(s.pressure, rounding.pressure_hpa),
                typed(s.conductivity, 0),
                typed(s.do, rounding.do_mg_l),
                do_mg,
                d.do_sat_mg_l if d else None,
                d.percent_saturation if d else None,
                d.specific_conductance_us_cm if d else None,
                criterion_mg_l(site, settings),
                shown,
                sorted(
                    [f for f in flags.get(s.id, []) if not f.code.startswith("holding.")]
                    + _holding_findings(s, settings, now, names),
                    key=lambda f: -Severity(f.severity).rank,
                ),
            )
        )
    return out


@dataclass(frozen=True)
class BottleRow:
    """A bottle on the custody page: kind, times, preservation, holding deadline, custody state."""

    stop: Stop
    bottle: Bottle
    deadline: datetime | None
    holding_rule: str
    custody_status: str
    custody_flags: list[Any]


def bottle_rows(trip: Trip, settings: ProgramSettings | None = None) -> list[BottleRow]:
    from core.rules.custody import custody_chains
    from core.rules.lab import bottle_analysis, bottle_holding_clock
    from core.science.holding import HOLDING_TIMES

    out: list[BottleRow] = []
    for chain in custody_chains(trip):
        b = chain.bottle
        pair = bottle_analysis(b, chain.stop.bottles)
        deadline, rule = None, "no holding time (blank)"
        if pair is not None:
            try:
                clock = bottle_holding_clock(
                    b,
                    b.collected_at,
                    stop_bottles=chain.stop.bottles,
                    overrides=settings.holding_overrides_h if settings else None,
                )
            except ValueError:
                rule = f"{HOLDING_TIMES[pair[1]].hours:g} h"
            else:
                if clock is not None:
                    deadline = clock.deadline
                    rule = f"{clock.rule.hours:g} h from {clock.clock_from}"
        out.append(BottleRow(chain.stop, b, deadline, rule, chain.status, chain.flags))
    return out


@dataclass(frozen=True)
class HandoffRow:
    """One hand-off as printed: the people, the time, the bottles by label, receipt details."""

    record: Any
    labels: list[str]
    temp_text: str


def handoff_rows(trip: Trip) -> list[HandoffRow]:
    labels = bottle_names(trip)
    return [
        HandoffRow(
            r,
            [labels.get(i, f"(unknown bottle {i[:8]})") for i in r.bottle_ids],
            "—" if r.temp is None else f"{r.temp.value:.1f} °C",
        )
        for r in sorted(trip.custody, key=lambda r: r.at)
    ]


@dataclass(frozen=True)
class PlotPoint:
    """A stop on the DO plot: the meter's DO, the saturation target, the criterion, Winkler values."""

    site_id: str
    arrived_at: datetime
    do_mg_l: float | None
    do_sat_mg_l: float | None
    criterion_mg_l: float | None
    winkler_mg_l: list[float]


def plot_points(trip: Trip, sites: dict[str, Site], settings: ProgramSettings) -> list[PlotPoint]:
    from core.rules.lab import live_winkler_values, stop_do_mg_l

    out = []
    for s in sorted(trip.stops, key=lambda s: s.arrived_at):
        d = s.derived
        do_mg = stop_do_mg_l(s)
        wink = live_winkler_values(s)
        out.append(
            PlotPoint(
                s.site_id,
                s.arrived_at,
                do_mg,
                d.do_sat_mg_l if d else None,
                criterion_mg_l(sites.get(s.site_id), settings),
                wink,
            )
        )
    return out


@dataclass(frozen=True)
class TripReport:
    """Everything the trip report prints, in the order it prints it."""

    trip: Trip
    settings: ProgramSettings
    generated_at: datetime
    rounding: Rounding
    calibrations: list[tuple[str, Any]]
    trip_flags: list[Any]
    stops: list[StopRow]
    results: list[ResultRow]
    bottles: list[BottleRow]
    handoffs: list[HandoffRow]
    plot: list[PlotPoint]
    cautions: list[str]


def trip_report(trip: Trip, sites: dict[str, Site], settings: ProgramSettings, now: datetime) -> TripReport:
    """The content of a trip's report (see the module docstring for the result statuses)."""
    from core.rules.qc import TRIP_KEY, trip_flags
    from core.science.winkler import SAFETY_NOTE

    cals = [("pre-trip calibration", trip.pre_calibration), ("post-trip check", trip.post_check)]
    return TripReport(
        trip=trip,
        settings=settings,
        generated_at=now,
        rounding=rounding_for(settings),
        calibrations=cals,
        trip_flags=trip_flags(trip, settings, now, sites=sites)[TRIP_KEY],
        stops=stop_rows(trip, sites, settings, now),
        results=result_rows(trip, settings),
        bottles=bottle_rows(trip, settings),
        handoffs=handoff_rows(trip),
        plot=plot_points(trip, sites, settings),
        cautions=[WADING_CAUTION, SAFETY_NOTE, DECIDES],
    )
