"""The bench screen (lab mode): bottles waiting, most urgent first; Winkler with the day's
standardisation; a BOD series table that shows each dilution's validity and the reportable result."""

from __future__ import annotations

from kivy.app import App
from kivy.factory import Factory
from kivy.properties import BooleanProperty, ListProperty, ObjectProperty, StringProperty
from kivy.uix.button import Button

from mobile.app.screens.base import BaseScreen

__all__ = ["BenchScreen", "WaitRow"]


class WaitRow(Button):
    """A bottle waiting for the bench; tapping it picks it for entry."""

    key = StringProperty("")
    analysis = StringProperty("")
    label = StringProperty("")
    expired = BooleanProperty(False)


def bench():
    return App.get_running_app().bench


class BenchScreen(BaseScreen):
    rows_box = ObjectProperty(None)
    chosen = StringProperty("")  # "trip_id|bottle_id"
    chosen_text = StringProperty("Tap a waiting bottle to enter its result.")
    standardisation = StringProperty("")
    reportable = StringProperty("Reportable BOD5: type a dilution.")
    row_status = ListProperty(["", "", ""])
    caution = StringProperty("")

    def on_kv_post(self, base_widget):
        from mobile.app.views import REAGENT_CAUTION

        self.caution = "▲ " + REAGENT_CAUTION
        for i in range(3):
            for key in ("s", "b", "i", "f"):
                self.ids[f"{key}{i}"].bind(text=self.update_series)

    def on_pre_enter(self, *_):
        self.standardisation = bench().standardisation_text()
        self.refresh()

    def refresh(self, *_):
        self.rows_box.clear_widgets()
        rows = bench().waiting()
        for w in rows:
            btn = WaitRow(
                text=w.text, expired=w.expired, key=f"{w.trip_id}|{w.bottle_id}", analysis=w.analysis, label=w.label
            )
            btn.bind(on_release=self.choose)
            self.rows_box.add_widget(btn)
        if not rows:
            self.rows_box.add_widget(Factory.WrapLabel(text="No bottles are waiting for a result."))

    def choose(self, row):
        self.chosen = row.key
        self.chosen_text = f"{row.label} · {row.analysis}"
        self.message = ""

    def standardise(self, text):
        try:
            self.standardisation = bench().set_standardisation(text)
            self.message = ""
        except ValueError as exc:
            self.message = f"■ {exc}"

    def _pair(self):
        if not self.chosen:
            raise ValueError("Tap a waiting bottle first, then type its result.")
        return self.chosen.split("|", 1)

    def save_winkler(self, titrant, titrated, analyst):
        try:
            trip_id, bottle_id = self._pair()
            self.message = bench().winkler(trip_id, bottle_id, titrant, titrated, analyst)
            self.refresh()
        except ValueError as exc:
            self.message = f"■ {exc}"

    def series(self):
        ids = self.ids
        return [(ids[f"s{i}"].text, ids[f"b{i}"].text, ids[f"i{i}"].text, ids[f"f{i}"].text) for i in range(3)]

    def update_series(self, *_):
        lines, reportable, _ = bench().bod_lines(self.series())
        self.row_status = [ln.text for ln in lines]
        self.reportable = reportable

    def save_bod(self, analyst):
        try:
            trip_id, bottle_id = self._pair()
            self.message = bench().bod(trip_id, bottle_id, self.series(), analyst)
            self.refresh()
        except ValueError as exc:
            self.message = f"■ {exc}"
