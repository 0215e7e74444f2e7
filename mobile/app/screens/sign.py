"""The signature screen: a hand-off of the open trip, and a pad to sign it with a finger.

The pad keeps each stroke as points in fractions of its own size (0 to 1, y downwards), the form a
:class:`core.records.models.Signature` stores, so a signature syncs and prints sharply at any size.
"""

from __future__ import annotations

from kivy.app import App
from kivy.graphics import Color, Line
from kivy.properties import ListProperty, NumericProperty, StringProperty
from kivy.uix.widget import Widget

from mobile.app.screens.base import BaseScreen, ctl

__all__ = ["SignScreen", "SignaturePad"]


class SignaturePad(Widget):
    """Draws what a finger writes and keeps it as strokes of [x, y] fractions of the pad."""

    strokes = ListProperty([])
    points = NumericProperty(0)

    def on_touch_down(self, touch):
        if self.disabled or not self.collide_point(*touch.pos):
            return super().on_touch_down(touch)
        touch.grab(self)
        with self.canvas:
            Color(0, 0, 0, 1)
            touch.ud["line"] = Line(points=[touch.x, touch.y], width=2)
        self.strokes.append([self._frac(touch.x, touch.y)])
        self.points += 1
        return True

    def on_touch_move(self, touch):
        if touch.grab_current is not self:
            return super().on_touch_move(touch)
        if self.collide_point(*touch.pos) and "line" in touch.ud:
            touch.ud["line"].points += [touch.x, touch.y]
            self.strokes[-1].append(self._frac(touch.x, touch.y))
            self.points += 1
        return True

    def on_touch_up(self, touch):
        if touch.grab_current is not self:
            return super().on_touch_up(touch)
        touch.ungrab(self)
        return True

    def _frac(self, x: float, y: float) -> list[float]:
        return [(x - self.x) / max(self.width, 1.0), 1.0 - (y - self.y) / max(self.height, 1.0)]

    def clear(self) -> None:
        self.canvas.clear()
        self.strokes = []
        self.points = 0

    @property
    def aspect(self) -> float:
        return max(0.25, min(20.0, self.width / max(self.height, 1.0)))


class SignScreen(BaseScreen):
    who = StringProperty("")
    trip_id = StringProperty("")
    record_id = StringProperty("")
    role = StringProperty("")

    def on_pre_enter(self, *_):
        self.next_side()

    def next_side(self):
        """The next side still to sign: on the trip in hand first, then on any other trip here."""
        c = ctl()
        first = c.trip.id if c.trip is not None else (c.open_trip_id() or "")
        ids = [first] if first else []
        ids += [t.id for t in c.store.list_trips() if t.id != first]
        bench = App.get_running_app().bench
        for trip_id in ids:
            sides = bench.unsigned(trip_id)
            if sides:
                self.trip_id = trip_id
                self.record_id, self.role, self.who = sides[0]
                self.ids.pad.clear()
                return
        self.trip_id, self.record_id, self.role = "", "", ""
        self.who = "Nothing to sign: every hand-off on this tablet is signed, or none is recorded yet."

    def save(self):
        if not self.record_id:
            return
        pad = self.ids.pad
        try:
            self.message = App.get_running_app().bench.sign(
                self.trip_id, self.record_id, self.role, [list(s) for s in pad.strokes], pad.aspect
            )
        except ValueError as exc:
            self.message = f"■ {exc}"
            return
        self.next_side()
