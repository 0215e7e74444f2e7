"""The start screen: program, crew, meter and the pre-trip calibration."""

from __future__ import annotations

from kivy.properties import BooleanProperty, ObjectProperty, StringProperty

from mobile.app.screens import calibration  # noqa: F401 - the CalPanel its kv rule uses
from mobile.app.screens.base import BaseScreen, ctl, go

__all__ = ["StartScreen"]


class StartScreen(BaseScreen):
    program_entry = ObjectProperty(None)
    crew_entry = ObjectProperty(None)
    meter_entry = ObjectProperty(None)
    cal_panel = ObjectProperty(None)
    form = ObjectProperty(None, allownone=True)
    #: What this trip's meter means by 100 % ("local" or "sea-level"); starts at the program's setting.
    percent_basis = StringProperty("local")
    offer_skip = BooleanProperty(False)  # no calibration typed: the crew may say so and go

    def on_pre_enter(self, *_):
        c = ctl()
        self.form = c.new_trip_form()
        self.program_entry.text = c.default_program()
        self.crew_entry.text = ""
        self.meter_entry.text = ""
        self.message = ""
        self.offer_skip = False
        self.percent_basis = c.program_percent_basis()
        self.cal_panel.load(self.form.pre_cal)

    def start(self, without_calibration=False):
        f = self.form
        f.program = self.program_entry.text
        f.crew = self.crew_entry.text
        f.meter_id = self.meter_entry.text
        f.meter_percent_basis = self.percent_basis
        self.cal_panel.update()
        refusal = ctl().start_trip(f, without_calibration=without_calibration)
        if refusal:
            self.message = "■ " + refusal.message
            self.offer_skip = refusal.where == "no calibration"
            if refusal.where == "calibration":
                self.cal_panel.problem = refusal.message
                self.message = "■ Not started: the pre-trip calibration above needs a fix (or clear all its fields)."
            return
        ctl().new_stop()
        go("stop")
