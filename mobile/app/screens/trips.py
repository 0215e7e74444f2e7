"""The trips screen: every trip on this tablet, resume the open one or start another."""

from __future__ import annotations

from kivy.factory import Factory
from kivy.properties import BooleanProperty, ObjectProperty, StringProperty

from mobile.app.screens.base import BaseScreen, ctl, go

__all__ = ["TripsScreen"]


class TripsScreen(BaseScreen):
    rows_box = ObjectProperty(None)
    has_open = BooleanProperty(False)
    open_title = StringProperty("")

    def on_pre_enter(self, *_):
        self.refresh()

    def refresh(self):
        c = ctl()
        self.rows_box.clear_widgets()
        lines = c.trip_lines()
        for line in lines:
            row = Factory.TripRow(title=line.title, detail=line.detail, status=line.status, key=line.id)
            row.bind(on_release=self.open_row)
            self.rows_box.add_widget(row)
        if not lines:
            self.rows_box.add_widget(
                Factory.WrapLabel(text="No trips on this tablet yet. Tap “Start a trip” to begin.")
            )
        open_id = c.open_trip_id()
        self.has_open = bool(open_id)
        self.open_title = next((line.title for line in lines if line.id == open_id), "")

    def open_row(self, row):
        c = ctl()
        c.open_trip(row.key)
        if c.trip.ended_at:
            go("end")
            return
        open_stops = [s for s in c.trip.stops if not s.closed]
        c.stop_id = open_stops[-1].id if open_stops else (c.trip.stops[-1].id if c.trip.stops else None)
        go("stop" if c.stop_id else "bottles")

    def resume(self):
        c = ctl()
        trip_id = c.open_trip_id()
        if trip_id:
            c.open_trip(trip_id)
            open_stops = [s for s in c.trip.stops if not s.closed]
            c.stop_id = open_stops[-1].id if open_stops else None
            go("stop" if c.stop_id else "bottles")

    def start_new(self):
        if ctl().open_trip_id():
            self.message = "A trip is still open on this tablet: resume it and end it before starting another."
            return
        go("start")
