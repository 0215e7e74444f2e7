"""The bottles screen: every bottle's holding-time clock in the open trip, most urgent first."""

from __future__ import annotations

from kivy.clock import Clock
from kivy.factory import Factory
from kivy.properties import ObjectProperty, StringProperty

from mobile.app.screens.base import BaseScreen, ctl, go

__all__ = ["BottlesScreen"]


class BottlesScreen(BaseScreen):
    rows_box = ObjectProperty(None)
    summary = StringProperty("")
    _tick = None

    def on_pre_enter(self, *_):
        self.refresh()
        self._tick = Clock.schedule_interval(self.refresh, 30)

    def on_enter(self, *_):
        ctl().remember("bottles")

    def on_leave(self, *_):
        super().on_leave()
        if self._tick:
            self._tick.cancel()

    def refresh(self, *_):
        lines = ctl().clock_lines()
        self.rows_box.clear_widgets()
        for c in lines:
            row = Factory.ClockRow(
                symbol=c.symbol,
                word=c.word,
                title=f"{c.label} · {c.kind}",
                where=c.where,
                detail=c.text,
                expired=c.expired,
                stop_id=c.stop_id,
            )
            row.bind(on_release=self.open_stop)
            self.rows_box.add_widget(row)
        if not lines:
            self.rows_box.add_widget(Factory.WrapLabel(text="No bottles in this trip yet."))
        n_exp = sum(1 for c in lines if c.expired)
        n_soon = sum(1 for c in lines if c.word == "SOON")
        self.summary = f"{len(lines)} bottle{'' if len(lines) == 1 else 's'} · {n_exp} expired · {n_soon} due soon"

    def open_stop(self, row):
        ctl().stop_id = row.stop_id
        go("stop")

    def back_to_stop(self):
        c = ctl()
        if c.trip is None:
            go("trips")
            return
        if c.stop is None:
            open_stops = [s for s in c.trip.stops if not s.closed]
            if open_stops:
                c.stop_id = open_stops[-1].id
            elif c.trip.stops:
                c.stop_id = c.trip.stops[-1].id
            else:
                c.new_stop()
        go("stop")
