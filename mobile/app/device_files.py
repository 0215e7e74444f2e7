"""This device's own small files in the data folder: the app's preferences and where the app was (no kivy).

Neither is trip data: `app-prefs.json` holds this tablet's default units and hub address,
`app-state.json` the trip, stop and screen the app was on (a cursor to resume at).
"""

from __future__ import annotations

import json
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any

from core.store.atomic import atomic_write_bytes

__all__ = [
    "AppPrefs",
    "APP_STATE_FILE",
    "APP_PREFS_FILE",
    "read_local_prefs",
    "write_local_prefs",
    "read_state",
    "write_state",
]

APP_STATE_FILE = "app-state.json"  # where the app was (trip, stop, screen) — UI cursor, not data
APP_PREFS_FILE = "app-prefs.json"  # this device's default units and hub address
LOCAL_PREFS = ("temp_unit", "pressure_unit", "cond_unit", "do_unit", "sync_target")


@dataclass
class AppPrefs:
    """Per-device defaults the settings screen edits (kept in the store's program settings when it can)."""

    temp_unit: str = "C"
    pressure_unit: str = "hPa"
    cond_unit: str = "µS/cm"
    do_unit: str = "mg/L"
    tolerance_mg_l: float = 0.2
    warm_min_mg_l: float = 5.0
    cold_min_mg_l: float = 6.5
    supersaturation_percent: float = 120.0
    sync_target: str = ""
    method: str = "benson-krause"
    #: What the program's meters mean by 100 %: "local" pressure or "sea-level" (760 mmHg); a program setting.
    percent_basis: str = "local"


def _read_json(path: Path) -> dict[str, Any]:
    try:
        doc = json.loads(path.read_text())
    except (OSError, ValueError):
        return {}
    return doc if isinstance(doc, dict) else {}


def read_local_prefs(data_dir: Path | str) -> AppPrefs:
    """The prefs this device keeps in its own file (defaults for anything missing or unreadable)."""
    d = _read_json(Path(data_dir) / APP_PREFS_FILE)
    if d.get("cond_unit") == "uS/cm":  # the typed spelling of µS/cm, kept by earlier versions
        d["cond_unit"] = "µS/cm"
    return AppPrefs(**{k: v for k, v in d.items() if k in AppPrefs.__dataclass_fields__})


def write_local_prefs(data_dir: Path | str, prefs: AppPrefs) -> None:
    local = {k: v for k, v in asdict(prefs).items() if k in LOCAL_PREFS}
    atomic_write_bytes(Path(data_dir) / APP_PREFS_FILE, json.dumps(local, indent=1).encode())


def read_state(data_dir: Path | str) -> dict[str, Any]:
    return _read_json(Path(data_dir) / APP_STATE_FILE)


def write_state(data_dir: Path | str, trip_id: str | None, stop_id: str | None, screen: str) -> None:
    """Remembers where the app was; a failed write only loses the resume point, never data."""
    doc = {"trip_id": trip_id, "stop_id": stop_id, "screen": screen}
    try:
        atomic_write_bytes(Path(data_dir) / APP_STATE_FILE, json.dumps(doc).encode())
    except OSError:
        pass
