"""The start screen: program, crew, meter and the pre-trip calibration."""
from __future__ import annotations

from kivy.properties import ObjectProperty

from mobile.app.screens import calibration  # noqa: F401 - the CalPanel its kv rule uses
from mobile.app.screens.base import BaseScreen, ctl, go

__all__ = ["StartScreen"]


class StartScreen(BaseScreen):
    program_entry = ObjectProperty(None)
    crew_entry = ObjectProperty(None)
    meter_entry = ObjectProperty(None)
    cal_panel = ObjectProperty(None)
    form = ObjectProperty(None, allownone=True)

    def on_pre_enter(self, *_):
        c = ctl()
        self.form = c.new_trip_form()
        self.program_entry.text = c.default_program()
        self.crew_entry.text = ""
        self.meter_entry.text = ""
        self.message = ""
        self.cal_panel.load(self.form.pre_cal)

    def start(self):
        f = self.form
        f.program = self.program_entry.text
        f.crew = self.crew_entry.text
        f.meter_id = self.meter_entry.text
        self.cal_panel.update()
        msg = ctl().start_trip(f)
        if msg:
            self.message = msg
            return
        ctl().new_stop()
        go("stop")
