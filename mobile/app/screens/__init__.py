"""The app's screens, one Python module beside each kv file (as in Kivy's own showcase).

A screen lays out and forwards events to the controller (mobile.app.controller); it starts no
thread, imports no sync and keeps no rules. `calibration` is the panel the start and end screens
share, `conflicts` the one the stop and end screens share.
"""

from __future__ import annotations

__all__ = ["SCREENS", "KV_MODULES", "register"]

# screen name -> its Screen class (the module is mobile.app.screens.<name>, its rule <name>.kv)
SCREENS = {
    "trips": "TripsScreen",
    "start": "StartScreen",
    "stop": "StopScreen",
    "bottles": "BottlesScreen",
    "end": "EndScreen",
    "sync": "SyncScreen",
    "settings": "SettingsScreen",
    "bench": "BenchScreen",
    "sign": "SignScreen",
}
# every module with a kv file beside it, parts before the screens that use them
KV_MODULES = ("calibration", "conflicts", *SCREENS)


def register() -> None:
    """Imports every screen module, so Kivy's Factory knows the classes their kv rules name."""
    import importlib

    for name in KV_MODULES:
        importlib.import_module(f"{__name__}.{name}")
