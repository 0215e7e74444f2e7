"""The stop screen: one visit's readings, the values computed from them, its flags and bottles."""

from __future__ import annotations

from kivy.app import App
from kivy.clock import Clock
from kivy.factory import Factory
from kivy.properties import BooleanProperty, ListProperty, NumericProperty, ObjectProperty, StringProperty

from mobile.app.screens import conflicts  # noqa: F401 - the ConflictPanel its kv rule uses
from mobile.app.screens.base import BaseScreen, ctl
from mobile.app.views import REAGENT_CAUTION, WADING_CAUTION, fmt_when, target_caption

__all__ = ["StopScreen"]


class StopScreen(BaseScreen):
    title = StringProperty("Stop")
    sat_text = StringProperty("—")
    percent_text = StringProperty("—")
    do_text = StringProperty("—")
    salinity_text = StringProperty("—")
    salinity_source = StringProperty("")
    target_doubt = StringProperty("")  # the target's inputs a warning is about ("pressure"), else ""
    target_caption = StringProperty(target_caption(""))
    reading_flagged = BooleanProperty(False)  # a warning or worse is about the DO reading itself
    site_text = StringProperty("Pick a site")
    site_values = ListProperty([])
    temp_unit = StringProperty("C")
    pressure_unit = StringProperty("hPa")
    cond_unit = StringProperty("µS/cm")
    cond_basis = StringProperty("at water temp")
    do_unit = StringProperty("mg/L")
    bottle_kind = StringProperty("do_fixed")
    fix_now = BooleanProperty(True)
    bottle_message = StringProperty("")
    closed = BooleanProperty(False)
    adding_site = BooleanProperty(False)
    site_chosen = BooleanProperty(False)
    compact = BooleanProperty(False)  # portrait with the soft keyboard up: one-line results
    stop_titles = ListProperty([])
    stop_pick_text = StringProperty("")
    arrived_zone = StringProperty("")  # which clock the arrival time is in (its UTC offset)
    flag_count_text = StringProperty("")
    flag_total = NumericProperty(0)
    wading_caution = StringProperty(WADING_CAUTION)
    reagent_caution = StringProperty(REAGENT_CAUTION)
    temp_entry = ObjectProperty(None)
    pressure_entry = ObjectProperty(None)
    cond_entry = ObjectProperty(None)
    do_entry = ObjectProperty(None)
    arrived_entry = ObjectProperty(None)
    label_entry = ObjectProperty(None)
    flag_box = ObjectProperty(None)
    flag_view = ObjectProperty(None)
    bottle_box = ObjectProperty(None)
    form_scroll = ObjectProperty(None)
    notes_entry = ObjectProperty(None)
    conflict_panel = ObjectProperty(None)
    _loading = False

    def on_pre_enter(self, *_):
        self.load()

    def on_enter(self, *_):
        ctl().remember("stop")

    def load(self):
        c = ctl()
        stop = c.stop
        if stop is None:
            return
        self._loading = True
        try:
            self.site_values = c.site_names()
            site = c.site(stop.site_id) if stop.site_id else None
            self.site_text = c.bridge.site_title(site) if site else "Pick a site"
            self.site_chosen = site is not None
            self.title = f"Stop {c.stop_number(stop)}" + (f" · {stop.site_id}" if stop.site_id else "")
            self.stop_titles = [self._stop_title(s) for s in c.trip.stops]
            self.stop_pick_text = self._stop_title(stop)
            self.arrived_entry.text = fmt_when(stop.arrived_at)
            self.arrived_zone = c.arrival_zone()
            self.temp_entry.text = stop.temp_text
            self.pressure_entry.text = stop.pressure_text
            self.cond_entry.text = stop.cond_text
            self.do_entry.text = stop.do_text
            self.notes_entry.text = stop.notes
            self.temp_unit = stop.temp_unit
            self.pressure_unit = stop.pressure_unit
            self.cond_unit = stop.cond_unit
            self.cond_basis = "SC at 25 °C" if stop.cond_is_sc25 else "at water temp"
            self.do_unit = stop.do_unit
            self.closed = stop.closed
            self.message = ""
            self.bottle_message = ""
        finally:
            self._loading = False
        self.show(c.stop_view())
        self.show_bottles()
        self.conflict_panel.refresh()

    def field(self, name, value):
        """A field changed (a keystroke, a unit, a site): recompute and show; the save is debounced."""
        if self._loading:
            return
        if name == "site":
            self.site_chosen = bool(value)
        self.message = ""
        self.show(ctl().set_stop_field(name, value))
        if name in ("arrived", "arrived_now"):
            self.arrived_zone = ctl().arrival_zone()
        self.commit()

    @staticmethod
    def _stop_title(stop):
        c = ctl()
        state = "closed" if stop.closed else "open"
        return f"Stop {c.stop_number(stop)} of {len(c.trip.stops)} · {stop.site_id or 'no site yet'} · {state}"

    def _refresh_stop_list(self):
        c = ctl()
        if c.stop is None:
            return
        self.stop_pick_text = self._stop_title(c.stop)
        self.stop_titles = [self._stop_title(s) for s in c.trip.stops]

    def pick_stop(self, title):
        """Another stop of the trip chosen from the list: show it (the current one stays saved)."""
        if self._loading or title == self.stop_pick_text:
            return
        c = ctl()
        for s in c.trip.stops:
            if self._stop_title(s) == title:
                App.get_running_app().save_trigger()
                c.stop_id = s.id
                c.remember("stop")
                self.load()
                self.form_scroll.scroll_y = 1
                return

    def pick_site(self, title):
        if self._loading or title == "Pick a site":
            return
        self.site_text = title
        site_id = ctl().site_id_for_title(title)
        self.field("site", site_id)
        self.title = f"Stop {ctl().stop_number(ctl().stop)} · {site_id}"
        self._refresh_stop_list()

    def toggle_new_site(self):
        self.adding_site = not self.adding_site

    def choose_kind(self, kind):
        self.bottle_kind = kind

    def choose_fix_now(self, fixed):
        self.fix_now = bool(fixed)

    def save_site(self, code, name, elevation_text):
        try:
            site_id = ctl().add_site(code, name, elevation_text)
        except ValueError as exc:
            self.message = str(exc)
            return
        self.adding_site = False
        self.site_values = ctl().site_names()
        title = ctl().bridge.site_title(ctl().site(site_id))
        self.site_text = title
        self.field("site", site_id)
        self.title = f"Stop {ctl().stop_number(ctl().stop)} · {site_id}"
        self.message = f"✓ Site {title} added."

    def set_unit(self, name, unit):
        setattr(self, name, unit)
        if name == "cond_basis":
            self.field("cond_is_sc25", unit != "at water temp")
        else:
            self.field(name, unit)

    def show(self, view):
        self.sat_text = view.sat_text
        self.percent_text = view.percent_text
        self.do_text = view.do_text
        value, _, source = view.salinity_text.partition(" (")
        self.salinity_text = value
        self.salinity_source = source.rstrip(")")
        self.target_doubt = view.target_doubt
        self.target_caption = target_caption(view.target_doubt)
        self.reading_flagged = view.reading_flagged
        serious = [f for f in view.flags if f.severity in ("warning", "stop-and-check")]
        self.flag_count_text = f"▲ {len(serious)} to check" if serious else ""
        self.flag_total = len(view.flags)
        box = self.flag_box
        box.clear_widgets()
        self.flag_view.scroll_y = 1  # the most serious flag first
        if not view.flags:
            box.add_widget(
                Factory.FlagRow(
                    symbol="○", word="NO FLAGS", severity="none", message="nothing to check on these values", action=""
                )
            )
        for f in view.flags:
            box.add_widget(
                Factory.FlagRow(symbol=f.symbol, word=f.word, message=f.message, action=f.action, severity=f.severity)
            )

    def show_bottles(self):
        c = ctl()
        stop = c.stop
        box = self.bottle_box
        box.clear_widgets()
        for b in stop.bottles if stop else []:
            row = Factory.BottleRow(
                title=b.label,
                detail=c.bottle_detail(b),
                key=b.id,
                can_fix=(b.fixed_at is None and b.kind != "bod"),
            )
            row.bind(on_fix=self.fix_bottle, on_remove=self.remove_bottle)
            box.add_widget(row)

    def add_bottle(self):
        msg = ctl().add_bottle(self.label_entry.text, self.bottle_kind, self.fix_now)
        self.bottle_message = ("■ Refused: " + msg) if msg else f"✓ Bottle {self.label_entry.text.strip()} added."
        if not msg:
            self.label_entry.text = ""
            self.commit()
        self.show_bottles()
        self.show(ctl().stop_view())
        # keep the field focused so a barcode scanner (types the ID, then Enter) can go on
        Clock.schedule_once(lambda _dt: setattr(self.label_entry, "focus", True), 0)

    def label_typed(self):
        """A new bottle ID is being typed: a refusal about the last one no longer applies."""
        if self.bottle_message.startswith("■"):
            self.bottle_message = ""

    def fix_bottle(self, row):
        ctl().fix_bottle(row.key)
        self.commit()
        self.show_bottles()

    def remove_bottle(self, row):
        ctl().remove_bottle(row.key)
        self.commit()
        self.show_bottles()

    def now_arrived(self):
        self.field("arrived_now", None)
        self.arrived_entry.text = fmt_when(ctl().stop.arrived_at)

    def close_stop(self):
        msg = ctl().close_stop()
        if msg:
            self.message = "■ Cannot close the stop: " + msg
            return
        self.closed = True
        self._refresh_stop_list()
        self.message = "✓ Stop closed and saved."
        App.get_running_app().save_trigger()

    def next_stop(self):
        c = ctl()
        if c.stop and not c.stop.closed:
            msg = c.close_stop()
            if msg:
                self.message = "■ Cannot close the stop: " + msg
                return
        c.new_stop()
        self.commit()
        self.load()
        self.form_scroll.scroll_y = 1

    def reopen(self):
        ctl().reopen_stop()
        self.closed = False
        self._refresh_stop_list()
        self.message = "Stop reopened for editing."
        self.commit()
