"""The calibration panel of the start and end screens: temperature, pressure, target, reading, verdict."""

from __future__ import annotations

from kivy.properties import BooleanProperty, ObjectProperty, StringProperty
from kivy.uix.boxlayout import BoxLayout

from mobile.app.forms import CalForm
from mobile.app.screens.base import ctl

__all__ = ["CalPanel"]


class CalPanel(BoxLayout):
    """The calibration helper on the start and end screens: temperature, pressure, target, reading, verdict."""

    post = BooleanProperty(False)
    target_text = StringProperty("—")
    verdict = StringProperty("")
    detail = StringProperty("")
    problem = StringProperty("")  # why this calibration cannot be stored as typed (set by the screen)
    temp_unit = StringProperty("C")
    pressure_unit = StringProperty("hPa")
    temp_entry = ObjectProperty(None)
    pressure_entry = ObjectProperty(None)
    reading_entry = ObjectProperty(None)
    form = ObjectProperty(None, allownone=True)

    def load(self, form: CalForm):
        """Shows a stored or new calibration form (every value it holds)."""
        # no form while the fields are filled: each field's on_text would copy the fields not yet
        # filled (still empty) into the form and wipe the stored values
        self.form = None
        self.problem = ""
        self.temp_entry.text = form.temp_text
        self.pressure_entry.text = form.pressure_text
        self.reading_entry.text = form.reading_text
        self.temp_unit = form.temp_unit
        self.pressure_unit = form.pressure_unit
        self.form = form
        self.update()

    def set_units(self, temp=None, pressure=None):
        if temp:
            self.temp_unit = temp
        if pressure:
            self.pressure_unit = pressure
        self.update()

    def update(self, *_):
        f = self.form
        if f is None:
            return
        f.temp_text = self.temp_entry.text
        f.pressure_text = self.pressure_entry.text
        f.reading_text = self.reading_entry.text
        f.temp_unit = self.temp_unit
        f.pressure_unit = self.pressure_unit
        self.problem = ""
        view = ctl().cal_view(f, post=self.post)
        self.target_text = view.target_text
        self.verdict = view.verdict
        self.detail = view.detail
