"""QC rules a senior technician would run on a trip, and the derive step of the store's save path.

Everything here is pure: records and a `now` in, new records or flags out; no disk, no clock.

Rules (code — severity — fires when):

=============================  ==============  =================================================
pressure.sea_level_adjusted    warning         station pressure far above the standard
                                               atmosphere at the site's elevation (core.science.pressure)
do.supersaturated              warning         % saturation above the program threshold
do.below_criterion             warning         DO below the site's / program's criterion
do.below_1day_minimum          warning         a spot DO below the EPA 1986 1-day minimum for the
                                               class and life stage (core.science.criteria)
do.hypoxic                     stop-and-check  DO below the hypoxia threshold
calibration.out_of_tolerance   stop-and-check  pre-trip calibration reading far from the 100 %
                                               target (core.science.calibration)
calibration.missing            warning         stops recorded but no pre-trip calibration
pressure.flat_across_elevations warning        pressures flat across stops > 150 m apart in
                                               elevation (core.science.pressure)
instrument.zero_do / .barometer warning        the trip's meter's calibration log: zero-DO reading or
                                               barometer outside its limit (core.science.calibration)
calibration.post_trip_drift    stop-and-check  post-trip check outside tolerance (core.science.calibration)
bottle.duplicate_label         stop-and-check  a bottle ID used twice in the trip or on the device
bottle.not_fixed               warning         a DO (Winkler) bottle without a fixing time
holding.expired / holding.soon (core.science.holding)  holding time passed / less than 25 % left
temp.out_of_range              warning         water temperature outside the plausible range
temp.looks_fahrenheit          (core.science.temperature) a °C value that looks like °F
temp.maybe_fahrenheit          note            a °C value of 32–40 that would be 0–4 °C as °F
temp.jump                      warning         temperature jumps implausibly between stops
conductivity.out_of_range      warning         conductivity outside the plausible range
conductivity.jump              warning         conductivity changes by more than a factor
stop.missing_required          stop-and-check  a closed stop lacks temperature, pressure or DO
stop.unknown_site              warning         the stop names a site not in the site list
=============================  ==============  =================================================

Thresholds are program settings (core.records.models.ProgramSettings), marked common practice there.

Site facts (elevation, water class, criteria) come from the stop's ``site_snapshot``, taken by
:func:`derive` the first time the stop is saved (or changed) with its site in the site list, and
kept afterwards: a later edit of the site list or of the program's criteria does not re-judge an
old record. Only a stop without a snapshot is judged by today's site list.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterable
from datetime import datetime
from typing import Any

from core.flags import Flag, Severity
from core.records.models import (
    DERIVED,
    Calibration,
    Derived,
    FlagRecord,
    ProgramSettings,
    Site,
    SiteSnapshot,
    Stop,
    Trip,
    keys_by_role,
)

__all__ = [
    "TRIP_KEY",
    "RULE_CODES",
    "derive",
    "derive_trip",
    "derive_document",
    "derive_basis",
    "derive_stop",
    "derive_calibration",
    "stop_flags",
    "trip_flags",
    "trip_level_flags",
    "core_version",
    "calibration_elevation_m",
    "site_snapshot",
    "checked_site",
    "snapshot_differences",
]

#: Key of trip-level findings (calibrations) in :func:`trip_flags`' result.
TRIP_KEY = "trip"

RULE_CODES = (
    "pressure.sea_level_adjusted",
    "do.supersaturated",
    "do.below_criterion",
    "do.below_1day_minimum",
    "do.hypoxic",
    "calibration.out_of_tolerance",
    "calibration.missing",
    "pressure.flat_across_elevations",
    "instrument.zero_do",
    "instrument.barometer",
    "calibration.post_trip_drift",
    "bottle.duplicate_label",
    "bottle.not_fixed",
    "holding.expired",
    "holding.soon",
    "temp.out_of_range",
    "temp.looks_fahrenheit",
    "temp.maybe_fahrenheit",
    "temp.jump",
    "conductivity.out_of_range",
    "conductivity.jump",
    "stop.missing_required",
    "stop.unknown_site",
)


def core_version() -> str:
    """The version of the science core that derived values (:func:`core.version`)."""
    import core

    return core.version()


# --------------------------------------------------------------------------------------------
# Derive (called by the store inside its one save path)
# --------------------------------------------------------------------------------------------
def _criteria_for(site: Site | None, settings: ProgramSettings):
    crit = settings.criteria()
    if site is None:
        return crit, None
    water_class = site.water_class
    if site.min_do_mg_l is not None or site.supersaturation_percent is not None:
        from dataclasses import replace

        changes: dict[str, float] = {}
        if site.min_do_mg_l is not None:
            changes["warm_min_mg_l"] = site.min_do_mg_l
            changes["cold_min_mg_l"] = site.min_do_mg_l
            water_class = water_class or "warm"
        if site.supersaturation_percent is not None:
            changes["supersaturation_percent"] = site.supersaturation_percent
        crit = replace(crit, **changes)
    return crit, water_class


def site_snapshot(site: Site, settings: ProgramSettings) -> SiteSnapshot:
    """The facts of `site` a stop's checks use, with the criteria that apply to it now (the
    site's own, else the program's for its water class)."""
    crit, water_class = _criteria_for(site, settings)
    minimum = None
    if water_class is not None:
        minimum = crit.warm_min_mg_l if water_class == "warm" else crit.cold_min_mg_l
    return SiteSnapshot(
        site_id=site.id,
        name=site.name,
        elevation_m=site.elevation_m,
        water_class=water_class,
        min_do_mg_l=minimum,
        supersaturation_percent=crit.supersaturation_percent,
    )


def _snapshot_site(snap: SiteSnapshot) -> Site:
    """The snapshot as a Site record (what the science and rules take)."""
    return Site.model_construct(
        id=snap.site_id,
        name=snap.name or snap.site_id,
        elevation_m=snap.elevation_m,
        water_class=snap.water_class,
        min_do_mg_l=snap.min_do_mg_l,
        supersaturation_percent=snap.supersaturation_percent,
    )


def checked_site(stop: Stop, sites: dict[str, Site] | None) -> Site | None:
    """The site facts a stop is judged by: its snapshot when it has one for its site, else the
    live site list's entry (None when neither knows the site)."""
    snap = stop.site_snapshot
    if snap is not None and snap.site_id == stop.site_id:
        return _snapshot_site(snap)
    return sites.get(stop.site_id) if sites is not None else None


def snapshot_differences(stop: Stop, site: Site | None, settings: ProgramSettings) -> list[str]:
    """What differs between the facts a stop was judged by (its snapshot) and the live site list,
    one readable phrase per fact; empty without a snapshot or a live site."""
    snap = stop.site_snapshot
    if snap is None or site is None or snap.site_id != stop.site_id:
        return []
    now = site_snapshot(site, settings)

    def show(v: Any, unit: str) -> str:
        return "none" if v is None else f"{v:g} {unit}".strip() if isinstance(v, float) else str(v)

    out = []
    for name, label, unit in (
        ("elevation_m", "elevation", "m"),
        ("water_class", "water class", ""),
        ("min_do_mg_l", "DO criterion", "mg/L"),
        ("supersaturation_percent", "supersaturation threshold", "%"),
    ):
        was, is_ = getattr(snap, name), getattr(now, name)
        if was != is_:
            out.append(f"{label} {show(was, unit)} when saved, {show(is_, unit)} in today's site list")
    return out


def derive_stop(
    stop: Stop, site: Site | None, settings: ProgramSettings, percent_basis: str | None = None
) -> Derived | None:
    """Saturation target, % saturation, salinity and science flags for one stop (None without T and P).

    `percent_basis` is the trip meter's % basis; None uses the program setting."""
    if stop.temp is None or stop.pressure is None:
        return None
    from core.science.assess import assess_reading

    kwargs: dict[str, Any] = {
        "method": settings.method,
        "percent_basis": percent_basis or settings.percent_basis,
        "compensation": settings.conductivity_compensation,
        "alpha": settings.conductivity_alpha_per_c,
    }
    if stop.conductivity is not None:
        kwargs["conductivity_us_cm"] = stop.conductivity.value
        kwargs["conductivity_is_sc25"] = stop.conductivity_is_sc25
    if stop.do is not None:
        if stop.do.unit == "%":
            kwargs["do_percent"] = stop.do.value
        else:
            kwargs["do_mg_l"] = stop.do.value
    if site is not None:
        kwargs["elevation_m"] = site.elevation_m
    try:
        kwargs["criteria"], kwargs["water_class"] = _criteria_for(site, settings)
        a = assess_reading(stop.temp.value, stop.pressure.value, **kwargs)
    except ValueError:
        return None
    return Derived(
        do_sat_mg_l=float(a.do_sat_mg_l),
        percent_saturation=None if a.percent_saturation is None else float(a.percent_saturation),
        do_mg_l=None if a.do_mg_l is None else float(a.do_mg_l),
        salinity=float(a.salinity),
        salinity_source=str(a.salinity_source),
        specific_conductance_us_cm=(
            None if a.specific_conductance_us_cm is None else float(a.specific_conductance_us_cm)
        ),
        pressure_hpa=float(a.pressure_hpa),
        temp_c=float(a.temp_c),
        method=str(a.method),
        core_version=str(a.core_version),
        flags=[FlagRecord.from_flag(f) for f in a.flags],
    )


def calibration_elevation_m(trip: Trip, sites: dict[str, Site], settings: ProgramSettings) -> float | None:
    """Where the meter was calibrated: the program's calibration elevation, else the trip's first site."""
    if settings.calibration_elevation_m is not None:
        return float(settings.calibration_elevation_m)
    for stop in sorted(trip.stops, key=lambda s: s.arrived_at):
        site = sites.get(stop.site_id)
        if site is not None:
            return float(site.elevation_m)
    return None


def derive_calibration(
    cal: Calibration | None,
    settings: ProgramSettings,
    *,
    post: bool,
    elevation_m: float | None = None,
    instrument: Any = None,
) -> Calibration | None:
    """The calibration with its target, difference, verdict, method and core version filled in.

    With `elevation_m` (where the meter was calibrated), the calibration pressure gets the same checks
    as a stop's (sea-level adjusted, far below standard). With `instrument` (the meter's
    core.records.models.InstrumentLog), a post-trip check uses the meter's drift limit."""
    if cal is None:
        return None
    from core.science.calibration import check_calibration, post_trip_check
    from core.science.pressure import station_pressure_flags

    fn = post_trip_check if post else check_calibration
    tolerance = cal.tolerance_mg_l if cal.tolerance_mg_l is not None else settings.calibration_tolerance_mg_l
    try:
        if post and instrument is not None and cal.tolerance_mg_l is None:
            # the meter's own drift limit (mg/L or % of the target) from its calibration log
            from core.science.calibration import calibration_target_mg_l, drift_tolerance_mg_l

            target = float(calibration_target_mg_l(cal.temp.value, cal.pressure.value, settings.method))
            tolerance = drift_tolerance_mg_l(instrument.drift_limit, instrument.drift_unit, target)
        r = fn(cal.reading_mg_l, cal.temp.value, cal.pressure.value, tolerance_mg_l=tolerance, method=settings.method)
    except ValueError:
        return cal.model_copy(
            update={
                "target_mg_l": None,
                "difference_mg_l": None,
                "accepted": None,
                "method": settings.method,
                "core_version": core_version(),
                "flags": [],
            }
        )
    flags = list(r.flags)
    if elevation_m is not None:
        try:
            for f in station_pressure_flags(cal.pressure.value, elevation_m):
                flags.append(Flag(f.code, f.severity, f"Calibration pressure: {f.message}", f.action, "pressure"))
        except ValueError:
            pass
    return cal.model_copy(
        update={
            "target_mg_l": float(r.target_mg_l),
            "difference_mg_l": float(r.difference_mg_l),
            "accepted": bool(r.passed),
            "method": settings.method,
            "core_version": core_version(),
            "flags": [FlagRecord.from_flag(f) for f in flags],
        }
    )


def derive_basis(site: Site | None, settings: ProgramSettings, percent_basis: str | None = None) -> str:
    """Fingerprint of what a stop's derived values depend on besides its own inputs."""
    import hashlib

    from core.store.atomic import canonical_json_bytes

    basis = {
        "site": site.model_dump(mode="json") if site is not None else None,
        "settings": settings.model_dump(mode="json"),
        "core": core_version(),
    }
    if percent_basis is not None:  # only when the trip's meter says; older fingerprints stay valid
        basis["meter_percent_basis"] = percent_basis
    return hashlib.sha256(canonical_json_bytes(basis)).hexdigest()[:16]


def derive_trip(trip: Trip, sites: dict[str, Site], settings: ProgramSettings) -> Trip:
    """The trip with every stop's and calibration's derived values recomputed from the inputs."""
    return derive(trip, sites, settings)[1]


def derive_document(
    trip: Trip, sites: dict[str, Site], settings: ProgramSettings, previous: dict[str, Any] | None = None
) -> dict[str, Any]:
    """The JSON document of `trip` with derived values filled in (what the store writes)."""
    return derive(trip, sites, settings, previous)[0]


def derive(
    trip: Trip,
    sites: dict[str, Site],
    settings: ProgramSettings,
    previous: dict[str, Any] | None = None,
    bases: dict[str, str] | None = None,
) -> tuple[dict[str, Any], Trip]:
    """(the JSON document, the Trip) with derived values filled in — the store's derive step.

    `previous` (the stored document of the same trip) lets a stop whose inputs are unchanged keep
    its derived values when they were made on the same basis (site, settings, core version); the
    result is the same as deriving again, only faster. `bases` caches :func:`derive_basis` by
    site id for the given sites and settings.
    """
    doc = trip.model_dump(mode="json")
    old_stops: dict[str, dict[str, Any]] = {}
    if previous is not None:
        old_stops = {s["id"]: s for s in previous.get("stops") or [] if isinstance(s, dict) and "id" in s}
    bases = {} if bases is None else bases
    derived_keys = keys_by_role(DERIVED, model=Stop)
    new_stops: list[Stop] = []
    meter_basis = trip.meter_percent_basis
    for stop, stop_doc in zip(trip.stops, doc["stops"], strict=True):
        old = old_stops.get(stop.id)
        snap = stop.site_snapshot
        if snap is None and old is not None and isinstance(old.get("site_snapshot"), dict):
            # a writer that does not know the field (an older form) keeps the stored snapshot
            snap = SiteSnapshot.model_validate_json(_json(old["site_snapshot"]))
        if snap is not None and snap.site_id != stop.site_id:
            snap = None  # the stop now names another site
        live = sites.get(stop.site_id)
        if snap is None and live is not None and not _same_inputs(old, stop_doc):
            snap = site_snapshot(live, settings)  # saved (or changed) with its site known
        if snap is not stop.site_snapshot:
            stop = stop.model_copy(update={"site_snapshot": snap})
            stop_doc["site_snapshot"] = None if snap is None else snap.model_dump(mode="json")
        site = live if snap is None else _snapshot_site(snap)
        key = stop.site_id if snap is None else "snapshot " + _json(stop_doc["site_snapshot"]).decode()
        if meter_basis is not None:
            key = f"{key}\x00{meter_basis}"
        if key not in bases:
            bases[key] = derive_basis(site, settings, meter_basis)
        basis = bases[key]
        if (
            old is not None
            and isinstance(old.get("derived"), dict)
            and old["derived"].get("basis") == basis
            and len(old) == len(stop_doc)
            and all(old.get(k) == v for k, v in stop_doc.items() if k not in derived_keys)
        ):
            if stop_doc.get("derived") == old["derived"]:
                new_stops.append(stop)
            else:
                new_stops.append(
                    stop.model_copy(update={"derived": Derived.model_validate_json(_json(old["derived"]))})
                )
            stop_doc["derived"] = old["derived"]
            continue
        derived = derive_stop(stop, site, settings, meter_basis)
        if derived is not None:
            derived = derived.model_copy(update={"basis": basis})
        stop_doc["derived"] = None if derived is None else derived.model_dump(mode="json")
        new_stops.append(stop.model_copy(update={"derived": derived}))
    cals: dict[str, Calibration | None] = {}
    cal_elevation = calibration_elevation_m(trip, sites, settings)
    for key, post in (("pre_calibration", False), ("post_check", True)):
        cal = derive_calibration(
            getattr(trip, key),
            settings,
            post=post,
            elevation_m=cal_elevation,
            instrument=settings.instrument(trip.meter_id),
        )
        cals[key] = cal
        doc[key] = None if cal is None else cal.model_dump(mode="json")
    return doc, trip.model_copy(update={"stops": new_stops, **cals})


def _same_inputs(old: dict[str, Any] | None, stop_doc: dict[str, Any]) -> bool:
    """True when a stored stop has the same fields as the one being saved (derived values and
    the site snapshot aside): the stop was not changed by this save."""
    if old is None:
        return False
    skip = ("derived", "site_snapshot")
    return {k for k in old if k not in skip} == {k for k in stop_doc if k not in skip} and all(
        old.get(k) == v for k, v in stop_doc.items() if k not in skip
    )


def _json(doc: Any) -> bytes:
    from core.store.atomic import canonical_json_bytes

    return canonical_json_bytes(doc)


# --------------------------------------------------------------------------------------------
# Rules
# --------------------------------------------------------------------------------------------
def _flag(code: str, severity: Severity, message: str, action: str, field: str | None = None) -> Flag:
    return Flag(code=code, severity=severity, message=message, action=action, field=field)


def _plausible(
    flags: list[Flag], field: str, what: str, value: float, bounds: tuple[float, float], unit: str, action: str
) -> None:
    """Adds a ``<field>.out_of_range`` warning when ``value`` lies outside the plausible ``bounds``."""
    lo, hi = bounds
    if not (lo <= value <= hi):
        flags.append(
            _flag(
                f"{field}.out_of_range",
                Severity.WARNING,
                f"{what} {value:g} {unit} is outside the plausible {lo:g}–{hi:g} {unit} for a stream.",
                action,
                field,
            )
        )


def stop_flags(
    stop: Stop,
    settings: ProgramSettings,
    now: datetime,
    *,
    site: Site | None = None,
    previous: Stop | None = None,
    labels_in_trip: Counter | None = None,
    other_bottle_labels: dict[str, str] | None = None,
    trip_id: str | None = None,
    sites_known: bool = False,
) -> list[Flag]:
    """Every finding for one stop, worst first: stored science flags, then the QC rules.

    `previous` is the stop before it on the route (for jump checks); `labels_in_trip` counts
    bottle labels in the whole trip; `other_bottle_labels` maps labels on the device to their
    trip id; `sites_known` says the site list was given (so an unknown site is worth a flag).
    """
    flags: list[Flag] = []
    if stop.derived is not None:
        flags.extend(f.to_flag() for f in stop.derived.flags)
    d = stop.derived

    # Site and elevation
    if sites_known and site is None:
        flags.append(
            _flag(
                "stop.unknown_site",
                Severity.WARNING,
                f"Site {stop.site_id} is not in the site list, so its elevation and criteria are unknown.",
                "Import the site list or correct the site code.",
                "site_id",
            )
        )
    if site is not None and stop.pressure is not None:
        from core.science.pressure import sea_level_adjusted_flag

        try:
            f = sea_level_adjusted_flag(stop.pressure.value, site.elevation_m)
        except ValueError:
            f = None
        if f is not None:
            flags.append(f)

    # Criteria and supersaturation, from the derived values
    if d is not None and (d.do_mg_l is not None or d.percent_saturation is not None):
        from core.science.criteria import do_criteria_flags

        try:
            crit, water_class = _criteria_for(site, settings)
            flags.extend(do_criteria_flags(d.do_mg_l, d.percent_saturation, water_class, crit))
        except ValueError:
            pass

    # Plausible ranges and °F look
    if stop.temp is not None:
        t = stop.temp.value
        _plausible(
            flags,
            "temp",
            "Water temperature",
            t,
            settings.temp_plausible_c,
            "°C",
            "Check the probe and the unit, and re-read if you can.",
        )
        from core.science.temperature import fahrenheit_hint

        try:
            f = fahrenheit_hint(t)
        except ValueError:
            f = None
        if f is not None:
            flags.append(f)
    if stop.conductivity is not None:
        _plausible(
            flags,
            "conductivity",
            "Conductivity",
            stop.conductivity.value,
            settings.conductivity_plausible_us_cm,
            "µS/cm",
            "Check the unit (µS/cm or mS/cm), rinse the cell and re-read.",
        )

    # Jumps from the previous stop
    if previous is not None:
        if stop.temp is not None and previous.temp is not None:
            jump = abs(stop.temp.value - previous.temp.value)
            if jump > settings.temp_jump_c:
                flags.append(
                    _flag(
                        "temp.jump",
                        Severity.WARNING,
                        f"Water temperature changed by {jump:.1f} °C since the previous stop "
                        f"({previous.site_id}), more than {settings.temp_jump_c:g} °C.",
                        "Confirm the reading and that the probe had settled.",
                        "temp",
                    )
                )
        if stop.conductivity is not None and previous.conductivity is not None:
            pair = (stop.conductivity.value, previous.conductivity.value)
            if min(pair) > 0:
                ratio = max(pair) / min(pair)
                if ratio > settings.conductivity_jump_ratio:
                    flags.append(
                        _flag(
                            "conductivity.jump",
                            Severity.WARNING,
                            f"Conductivity changed by a factor of {ratio:.1f} since the previous stop "
                            f"({previous.site_id}), more than {settings.conductivity_jump_ratio:g}×.",
                            "Check for a tributary or discharge, or a unit mix-up, and re-read.",
                            "conductivity",
                        )
                    )

    # Required fields when the stop is closed
    if stop.closed_at is not None:
        missing = [
            label
            for name, label in (("temp", "water temperature"), ("pressure", "station pressure"), ("do", "meter DO"))
            if getattr(stop, name) is None
        ]
        if missing:
            flags.append(
                _flag(
                    "stop.missing_required",
                    Severity.STOP,
                    f"The stop at {stop.site_id} was closed without {', '.join(missing)}.",
                    "Reopen the stop and enter the missing readings, or note why they are missing.",
                    missing[0].split()[-1] if len(missing) == 1 else None,
                )
            )

    # Bottles: labels and holding times
    others = other_bottle_labels or {}
    for b in stop.bottles:
        if labels_in_trip is not None and labels_in_trip.get(b.label, 0) > 1:
            flags.append(
                _flag(
                    "bottle.duplicate_label",
                    Severity.STOP,
                    f"Bottle ID {b.label} is used more than once in this trip.",
                    "Check the bottle labels and correct the ID typed or scanned.",
                    "label",
                )
            )
        elif b.label in others and others[b.label] != trip_id:
            flags.append(
                _flag(
                    "bottle.duplicate_label",
                    Severity.STOP,
                    f"Bottle ID {b.label} is already used on this device (trip {others[b.label][:8]}).",
                    "Check the bottle label; relabel the bottle if it was reused.",
                    "label",
                )
            )
        if b.kind == "do-fixed" and b.fixed_at is None:
            flags.append(
                _flag(
                    "bottle.not_fixed",
                    Severity.WARNING,
                    f"DO bottle {b.label} has no fixing time; Winkler samples are fixed on site.",
                    "Fix the sample now (see the SOP for reagent handling) and record the time.",
                    "fixed_at",
                )
            )
        from core.rules.lab import bottle_clock  # the one holding rule (app, lab commands, QC)

        try:
            clock = bottle_clock(b, now, stop_bottles=stop.bottles, overrides=settings.holding_overrides_h)
        except ValueError:
            clock = None  # a bad SOP override: the settings' own check reports it
        if clock is not None and clock.flag is not None:
            flags.append(clock.flag)
    return _dedupe(flags)


def _dedupe(flags: Iterable[Flag]) -> list[Flag]:
    seen: set[tuple[str, str | None, str]] = set()
    out: list[Flag] = []
    for f in flags:
        key = (f.code, f.field, f.message)
        if key in seen:
            continue
        seen.add(key)
        out.append(f)
    out.sort(key=lambda f: -Severity(f.severity).rank)
    return out


def trip_level_flags(trip: Trip, settings: ProgramSettings, sites: dict[str, Site] | None = None) -> list[Flag]:
    """Findings for the whole trip: calibration (the science's verdicts, stored at save time) and, with
    the sites, pressures that stay flat across the route's elevations."""
    flags: list[Flag] = []
    if sites:
        from core.science.pressure import flat_pressure_flag

        readings = [
            (f"Stop {i} ({s.site_id})", sites[s.site_id].elevation_m, s.pressure.value)
            for i, s in enumerate(sorted(trip.stops, key=lambda s: s.arrived_at), 1)
            if s.pressure is not None and s.site_id in sites
        ]
        try:
            flat = flat_pressure_flag(readings)
        except ValueError:
            flat = None
        if flat is not None:
            flags.append(flat)
    pre = trip.pre_calibration
    if pre is None:
        if trip.stops or trip.started_without_calibration:
            flags.append(
                _flag(
                    "calibration.missing",
                    Severity.WARNING,
                    "The crew started this trip without a pre-trip calibration (recorded at the start)."
                    if trip.started_without_calibration
                    else "No pre-trip calibration is recorded for this trip.",
                    "Record the air calibration (or note why none was done) before relying on the DO readings.",
                    "pre_calibration",
                )
            )
    else:
        flags.extend(f.to_flag() for f in pre.flags)
    if trip.post_check is not None:
        flags.extend(f.to_flag() for f in trip.post_check.flags)
    log = settings.instrument(trip.meter_id)
    if log is not None:
        try:
            flags.extend(log.flags())
        except ValueError:
            pass
    return _dedupe(flags)


def trip_flags(
    trip: Trip,
    settings: ProgramSettings,
    now: datetime,
    other_bottle_labels: dict[str, str] | None = None,
    sites: dict[str, Site] | None = None,
) -> dict[str, list[Flag]]:
    """Findings per stop id, in route order, plus trip-level ones under :data:`TRIP_KEY`.

    `other_bottle_labels` (label → trip id, e.g. DeviceStore.bottle_labels_in_use()) lets the
    duplicate check look across the device; labels of this trip itself are ignored there.
    """
    labels = Counter(b.label for s in trip.stops for b in s.bottles)
    route = sorted(trip.stops, key=lambda s: s.arrived_at)
    out: dict[str, list[Flag]] = {TRIP_KEY: trip_level_flags(trip, settings, sites)}
    prev: Stop | None = None
    for stop in route:
        site = checked_site(stop, sites)
        out[stop.id] = stop_flags(
            stop,
            settings,
            now,
            site=site,
            previous=prev,
            labels_in_trip=labels,
            other_bottle_labels=other_bottle_labels,
            trip_id=trip.id,
            sites_known=sites is not None,
        )
        prev = stop
    return out
