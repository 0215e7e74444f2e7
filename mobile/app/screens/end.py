"""The end screen: what needs attention, the post-trip check, ending the trip."""

from __future__ import annotations

from kivy.factory import Factory
from kivy.properties import BooleanProperty, ObjectProperty, StringProperty

from mobile.app.screens import (
    calibration,  # noqa: F401 - the CalPanel its kv rule uses
    conflicts,  # noqa: F401 - the ConflictPanel its kv rule uses
)
from mobile.app.screens.base import BaseScreen, ctl

__all__ = ["EndScreen"]


class EndScreen(BaseScreen):
    cal_panel = ObjectProperty(None)
    conflict_panel = ObjectProperty(None)
    rows_box = ObjectProperty(None)
    ended = BooleanProperty(False)
    returned_text = StringProperty("")  # why the office returned the trip; empty when it has not

    def on_pre_enter(self, *_):
        c = ctl()
        if c.trip is None:
            return
        self.cal_panel.load(c.trip.post_check)
        self.ended = bool(c.trip.ended_at)
        self.message = ""
        self._show_returned()
        self.refresh()

    def on_enter(self, *_):
        ctl().remember("end")

    def refresh(self, *_):
        self.conflict_panel.refresh()
        self.cal_panel.update()
        self.rows_box.clear_widgets()
        lines = ctl().attention_lines()
        for line in lines:
            self.rows_box.add_widget(Factory.WrapLabel(text=line))
        if not lines:
            self.rows_box.add_widget(Factory.WrapLabel(text="✓ Nothing needs attention."))

    def end_trip(self):
        self.cal_panel.update()
        refusal = ctl().end_trip()
        if refusal:
            self.message = "■ Cannot end the trip: " + refusal.message
            if refusal.where == "calibration":
                self.cal_panel.problem = refusal.message
                self.message = "■ Not ended: the post-trip check above needs a fix (or clear all its fields)."
            return
        self.ended = True
        self.message = "✓ Trip ended and saved. Send it to the hub from the sync screen."
        self.refresh()

    def _show_returned(self):
        why = ctl().returned_reasons()
        self.returned_text = f"This trip was {why}." if why else ""

    def resubmit(self):
        refusal = ctl().resubmit()
        if refusal:
            self.message = "■ " + refusal
            return
        self._show_returned()
        self.message = "✓ Handed back to the office and saved. Send it to the hub from the sync screen."
        self.refresh()
