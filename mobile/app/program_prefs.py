"""The settings screen's logic: the program limits as typed, this device's prefs, the hub address check (no kivy).

The program limits (tolerance, criteria, supersaturation threshold, method, meter % basis) live in the
store's program settings; units and the hub address in this device's `app-prefs.json`
(mobile.app.device_files). The controller forwards to these functions.
"""

from __future__ import annotations

from typing import Any

from mobile.app import device_files
from mobile.app.device_files import AppPrefs
from mobile.app.numeric import parse_decimal

__all__ = [
    "SETTING_FIELDS",
    "setting_range",
    "setting_problem",
    "load_prefs",
    "save_prefs",
    "settings_notice",
    "hub_problem",
    "shown_address",
    "prefs_from_form",
]

# The program limits the settings screen edits: the ProgramSettings field, its words and unit on screen.
# Their accepted ranges are the record's own (core.records.models.ProgramSettings), read by setting_range.
SETTING_FIELDS = {
    "calibration_tolerance_mg_l": ("Calibration tolerance", "mg/L"),
    "warm_min_mg_l": ("Warm-water minimum", "mg/L"),
    "cold_min_mg_l": ("Cold-water minimum", "mg/L"),
    "supersaturation_percent": ("Supersaturation threshold", "%"),
}


def setting_range(name: str) -> tuple[float | None, bool, float | None, bool]:
    """(low, low included, high, high included) of a ProgramSettings field, from the record's own bounds."""
    from core.records.models import ProgramSettings

    lo = hi = None
    lo_in = hi_in = True
    for m in ProgramSettings.model_fields[name].metadata:
        if getattr(m, "ge", None) is not None:
            lo, lo_in = float(m.ge), True
        if getattr(m, "gt", None) is not None:
            lo, lo_in = float(m.gt), False
        if getattr(m, "le", None) is not None:
            hi, hi_in = float(m.le), True
        if getattr(m, "lt", None) is not None:
            hi, hi_in = float(m.lt), False
    return lo, lo_in, hi, hi_in


def setting_problem(name: str, text: str) -> tuple[float | None, str | None]:
    """(value, None) for a program limit typed on the settings screen, or (None, one sentence why not)."""
    from mobile.app.numeric import DecimalError

    label, unit = SETTING_FIELDS[name]
    lo, lo_in, hi, hi_in = setting_range(name)
    span = (
        f"from {lo:g} to {hi:g} {unit}"
        if lo_in and hi_in
        else f"{'from' if lo_in else 'more than'} {lo:g} and {'up to' if hi_in else 'below'} {hi:g} {unit}"
    )
    try:
        value = parse_decimal(text, label=label)
    except DecimalError as exc:
        return None, str(exc)
    if value is None:
        return None, f"{label} is empty; type a value {span}."
    ok = (lo is None or (value >= lo if lo_in else value > lo)) and (
        hi is None or (value <= hi if hi_in else value < hi)
    )
    if not ok:
        return None, f"{label} {value:g} {unit} is outside the accepted range; type a value {span}."
    return value, None


def load_prefs(store: Any) -> AppPrefs:
    """Units and hub from this device's app-prefs.json; method, criteria, tolerance from the program settings."""
    prefs = device_files.read_local_prefs(store.data_dir)
    try:
        st = store.settings()
        prefs.method = st.method
        prefs.warm_min_mg_l = st.warm_min_mg_l
        prefs.cold_min_mg_l = st.cold_min_mg_l
        prefs.supersaturation_percent = st.supersaturation_percent
        prefs.tolerance_mg_l = st.calibration_tolerance_mg_l
        prefs.percent_basis = str(st.percent_basis)
    except Exception:  # noqa: BLE001 - unreadable settings: keep the defaults, the store reports it
        pass
    return prefs


#: The program settings the settings screen edits: settings field → AppPrefs field.
_PROGRAM_FIELDS = {
    "warm_min_mg_l": "warm_min_mg_l",
    "cold_min_mg_l": "cold_min_mg_l",
    "supersaturation_percent": "supersaturation_percent",
    "calibration_tolerance_mg_l": "tolerance_mg_l",
    "method": "method",
    "percent_basis": "percent_basis",
}


def save_prefs(store: Any, prefs: AppPrefs, before: AppPrefs | None = None) -> None:
    """The program limits the person changed (against `before`, what the screen was loaded with;
    None: all of them) into the store's program settings, read and written under the store's lock,
    so a value a pull brought meanwhile is not put back; units and hub into this device's file."""
    changed = {
        key: getattr(prefs, attr)
        for key, attr in _PROGRAM_FIELDS.items()
        if before is None or getattr(prefs, attr) != getattr(before, attr)
    }
    if changed:
        store.update_settings(lambda current: current.model_copy(update=changed))
    device_files.write_local_prefs(store.data_dir, prefs)


def settings_notice(store: Any) -> str:
    """What the settings screen says when stored settings held values the limits now refuse."""
    try:
        store.settings()
    except Exception:  # noqa: BLE001 - unreadable settings are reported where they are read
        return ""
    from core.records.messages import label_for

    dropped = store.left_out().get("settings")
    if not dropped:
        return ""
    named = []
    for path in dropped:
        field, _, index = path.partition(".")
        named.append(f"{label_for(field)} no. {int(index) + 1}" if index.isdigit() else label_for(field))
    return (
        f"▲ Stored settings held values outside today's limits ({', '.join(named)}): defaults are"
        " shown for them. The stored record is kept whole in the quarantine folder; Save to keep these."
    )


def hub_problem(target: str) -> str | None:
    """Why a typed hub address cannot be stored or used (a user name or password in it, plain
    http:// to another machine), as one sentence that never repeats a password; or None."""
    from sync.errors import ConfigError
    from sync.targets import check_address

    try:
        check_address(target)
    except ConfigError as exc:
        text = str(exc)
        return f"■ Hub not saved: {text[:1].upper()}{text[1:]}."
    return None


def shown_address(target: str) -> str:
    """A hub address as a status line may show it (any user-info part removed)."""
    from sync.session import redact_url

    return redact_url(target)


def prefs_from_form(
    current: AppPrefs, units: dict[str, str], limits: dict[str, str], sync_target: str, percent_basis: str | None
) -> tuple[AppPrefs | None, str | None]:
    """(the prefs the settings screen asks for, None), or (None, one sentence why not) when one entry is refused.

    `limits` maps each SETTING_FIELDS name to its text; `percent_basis` is "local" or "sea-level"
    (None keeps `current`'s).
    """
    from core.science.oxygen import PERCENT_BASES

    problem = hub_problem(sync_target) if sync_target.strip() else None
    if problem:
        return None, problem
    basis = current.percent_basis if percent_basis is None else percent_basis
    if basis not in PERCENT_BASES:
        return None, "Meter 100 % basis: choose local pressure or 760 mmHg."
    values: dict[str, float] = {}
    for name in SETTING_FIELDS:
        value, problem = setting_problem(name, limits.get(name, ""))
        if problem:
            return None, problem
        values[name] = value
    prefs = AppPrefs(
        temp_unit=units["temp_unit"],
        pressure_unit=units["pressure_unit"],
        cond_unit=units["cond_unit"],
        do_unit=units["do_unit"],
        tolerance_mg_l=values["calibration_tolerance_mg_l"],
        warm_min_mg_l=values["warm_min_mg_l"],
        cold_min_mg_l=values["cold_min_mg_l"],
        supersaturation_percent=values["supersaturation_percent"],
        sync_target=sync_target.strip(),
        method=current.method,
        percent_basis=basis,
    )
    return prefs, None
