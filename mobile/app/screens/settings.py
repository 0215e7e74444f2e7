"""The settings screen: this tablet's default units, the program's limits, the hub address."""
from __future__ import annotations

from kivy.properties import ObjectProperty, StringProperty

from mobile.app.device_files import AppPrefs
from mobile.app.numeric import DecimalError, parse_decimal
from mobile.app.screens.base import BaseScreen, ctl

__all__ = ["SettingsScreen"]


class SettingsScreen(BaseScreen):
    temp_unit = StringProperty("C")
    pressure_unit = StringProperty("hPa")
    cond_unit = StringProperty("uS/cm")
    do_unit = StringProperty("mg/L")
    tolerance_entry = ObjectProperty(None)
    warm_entry = ObjectProperty(None)
    cold_entry = ObjectProperty(None)
    super_entry = ObjectProperty(None)
    target_entry = ObjectProperty(None)

    def choose(self, name, value):
        """A default unit picked on the settings screen (kept until Save)."""
        setattr(self, name, value)

    def on_pre_enter(self, *_):
        p = ctl().prefs
        self.temp_unit, self.pressure_unit = p.temp_unit, p.pressure_unit
        self.cond_unit, self.do_unit = p.cond_unit, p.do_unit
        self.tolerance_entry.text = f"{p.tolerance_mg_l:g}"
        self.warm_entry.text = f"{p.warm_min_mg_l:g}"
        self.cold_entry.text = f"{p.cold_min_mg_l:g}"
        self.super_entry.text = f"{p.supersaturation_percent:g}"
        self.target_entry.text = p.sync_target
        self.message = ""

    def save(self):

        try:
            tol = parse_decimal(self.tolerance_entry.text, label="Calibration tolerance")
            warm = parse_decimal(self.warm_entry.text, label="Warm-water minimum")
            cold = parse_decimal(self.cold_entry.text, label="Cold-water minimum")
            sup = parse_decimal(self.super_entry.text, label="Supersaturation limit")
        except DecimalError as exc:
            self.message = str(exc)
            return
        checks = [("Calibration tolerance", tol, 0.01, 2.0, "mg/L"), ("Warm-water minimum", warm, 0, 15, "mg/L"),
                  ("Cold-water minimum", cold, 0, 15, "mg/L"), ("Supersaturation limit", sup, 100, 200, "%")]
        for label, v, lo, hi, unit in checks:
            if v is None or not lo <= v <= hi:
                self.message = f"{label} must be between {lo:g} and {hi:g} {unit}."
                return
        old = ctl().prefs
        prefs = AppPrefs(temp_unit=self.temp_unit, pressure_unit=self.pressure_unit,
                         cond_unit=self.cond_unit, do_unit=self.do_unit, tolerance_mg_l=tol,
                         warm_min_mg_l=warm, cold_min_mg_l=cold, supersaturation_percent=sup,
                         sync_target=self.target_entry.text.strip(), method=old.method)
        try:
            ctl().save_prefs(prefs)
        except Exception as exc:  # noqa: BLE001 - store refusals are one sentence
            self.message = f"Settings not saved: {exc}"
            return
        self.message = "✓ Settings saved."
