"""The settings screen: this tablet's default units, the program's limits and meter % basis, the hub address."""

from __future__ import annotations

from kivy.properties import ObjectProperty, StringProperty

from mobile.app.screens.base import BaseScreen, ctl

__all__ = ["SettingsScreen"]


class SettingsScreen(BaseScreen):
    temp_unit = StringProperty("C")
    pressure_unit = StringProperty("hPa")
    cond_unit = StringProperty("µS/cm")
    do_unit = StringProperty("mg/L")
    #: What the program's meters mean by 100 % ("local" or "sea-level"); a new trip's start screen begins there.
    percent_basis = StringProperty("local")
    tolerance_entry = ObjectProperty(None)
    warm_entry = ObjectProperty(None)
    cold_entry = ObjectProperty(None)
    super_entry = ObjectProperty(None)
    target_entry = ObjectProperty(None)

    def choose(self, name, value):
        """A default unit or the meters' % basis picked on the settings screen (kept until Save)."""
        setattr(self, name, value)

    def on_pre_enter(self, *_):
        p = ctl().prefs
        self.temp_unit, self.pressure_unit = p.temp_unit, p.pressure_unit
        self.cond_unit, self.do_unit = p.cond_unit, p.do_unit
        self.percent_basis = p.percent_basis
        self.tolerance_entry.text = f"{p.tolerance_mg_l:g}"
        self.warm_entry.text = f"{p.warm_min_mg_l:g}"
        self.cold_entry.text = f"{p.cold_min_mg_l:g}"
        self.super_entry.text = f"{p.supersaturation_percent:g}"
        self.target_entry.text = p.sync_target
        self.message = ctl().settings_notice()

    def save(self):
        units = {
            "temp_unit": self.temp_unit,
            "pressure_unit": self.pressure_unit,
            "cond_unit": self.cond_unit,
            "do_unit": self.do_unit,
        }
        limits = {
            "calibration_tolerance_mg_l": self.tolerance_entry.text,
            "warm_min_mg_l": self.warm_entry.text,
            "cold_min_mg_l": self.cold_entry.text,
            "supersaturation_percent": self.super_entry.text,
        }
        refusal = ctl().save_settings_form(units, limits, self.target_entry.text, self.percent_basis)
        self.message = refusal or "✓ Settings saved."
