"""The app's screens: thin Screen classes that forward events to the controller and show what it returns."""
from __future__ import annotations

import threading

from kivy.app import App
from kivy.clock import Clock, mainthread
from kivy.factory import Factory
from kivy.properties import (BooleanProperty, ListProperty, NumericProperty, ObjectProperty,
                             StringProperty)
from kivy.uix.boxlayout import BoxLayout
from kivy.uix.screenmanager import Screen

from mobile.app.controller import REAGENT_CAUTION, WADING_CAUTION, AppPrefs, fmt_when
from mobile.app.forms import BOTTLE_KINDS, CalForm

__all__ = ["TripsScreen", "StartScreen", "StopScreen", "BottlesScreen", "EndScreen", "SyncScreen",
           "SettingsScreen"]


def ctl():
    return App.get_running_app().ctl


def go(name: str) -> None:
    App.get_running_app().go(name)


class BaseScreen(Screen):
    message = StringProperty("")

    def on_leave(self, *_):
        # no field stays focused (and no soft keyboard stays up) on a screen no one sees
        from kivy.uix.textinput import TextInput

        for w in self.walk(restrict=True):
            if isinstance(w, TextInput) and w.focus:
                w.focus = False

    def commit(self):
        App.get_running_app().save_trigger()


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
            self.rows_box.add_widget(Factory.WrapLabel(
                text="No trips on this tablet yet. Tap “Start a trip” to begin."))
        open_id = c.open_trip_id()
        self.has_open = bool(open_id)
        self.open_title = next((l.title for l in lines if l.id == open_id), "")

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


class CalPanel(BoxLayout):
    """The calibration helper on the start and end screens: temperature, pressure, target, reading, verdict."""

    post = BooleanProperty(False)
    target_text = StringProperty("—")
    verdict = StringProperty("")
    detail = StringProperty("")
    temp_unit = StringProperty("C")
    pressure_unit = StringProperty("hPa")
    temp_entry = ObjectProperty(None)
    pressure_entry = ObjectProperty(None)
    reading_entry = ObjectProperty(None)
    form = ObjectProperty(None, allownone=True)

    def load(self, form: CalForm):
        self.form = form
        self.temp_entry.text = form.temp_text
        self.pressure_entry.text = form.pressure_text
        self.reading_entry.text = form.reading_text
        self.temp_unit = form.temp_unit
        self.pressure_unit = form.pressure_unit
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
        view = ctl().cal_view(f, post=self.post)
        self.target_text = view.target_text
        self.verdict = view.verdict
        self.detail = view.detail


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


class StopScreen(BaseScreen):
    title = StringProperty("Stop")
    sat_text = StringProperty("—")
    percent_text = StringProperty("—")
    do_text = StringProperty("—")
    salinity_text = StringProperty("—")
    salinity_source = StringProperty("")
    arrived_text = StringProperty("")
    site_text = StringProperty("Pick a site")
    site_values = ListProperty([])
    temp_unit = StringProperty("C")
    pressure_unit = StringProperty("hPa")
    cond_unit = StringProperty("uS/cm")
    cond_basis = StringProperty("at water temp")
    do_unit = StringProperty("mg/L")
    bottle_kind = StringProperty("do_fixed")
    fix_now = BooleanProperty(True)
    bottle_message = StringProperty("")
    closed = BooleanProperty(False)
    adding_site = BooleanProperty(False)
    site_chosen = BooleanProperty(False)
    compact = BooleanProperty(False)       # portrait with the soft keyboard up: one-line results
    stop_titles = ListProperty([])
    stop_pick_text = StringProperty("")
    flag_count_text = StringProperty("")
    wading_caution = StringProperty(WADING_CAUTION)
    reagent_caution = StringProperty(REAGENT_CAUTION)
    temp_entry = ObjectProperty(None)
    pressure_entry = ObjectProperty(None)
    cond_entry = ObjectProperty(None)
    do_entry = ObjectProperty(None)
    arrived_entry = ObjectProperty(None)
    label_entry = ObjectProperty(None)
    flag_box = ObjectProperty(None)
    bottle_box = ObjectProperty(None)
    form_scroll = ObjectProperty(None)
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
            self.temp_entry.text = stop.temp_text
            self.pressure_entry.text = stop.pressure_text
            self.cond_entry.text = stop.cond_text
            self.do_entry.text = stop.do_text
            self.ids.notes.text = stop.notes
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

    def field(self, name, value):
        """A field changed (a keystroke, a unit, a site): recompute and show; the save is debounced."""
        if self._loading:
            return
        if name == "site":
            self.site_chosen = bool(value)
        self.message = ""
        self.show(ctl().set_stop_field(name, value))
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
        serious = [f for f in view.flags if f.severity in ("warning", "stop-and-check")]
        self.flag_count_text = f"▲ {len(serious)} to check" if serious else ""
        box = self.flag_box
        box.clear_widgets()
        if not view.flags:
            box.add_widget(Factory.FlagRow(symbol="○", word="NO FLAGS", severity="none",
                                           message="nothing to check on these values", action=""))
        for f in view.flags:
            box.add_widget(Factory.FlagRow(symbol=f.symbol, word=f.word, message=f.message,
                                           action=f.action, severity=f.severity))

    def show_bottles(self):
        c = ctl()
        stop = c.stop
        box = self.bottle_box
        box.clear_widgets()
        kinds = dict(BOTTLE_KINDS)
        for b in stop.bottles if stop else []:
            fixed = f"fixed {fmt_when(b.fixed_at)[-5:]}" if b.fixed_at else (
                "not fixed" if b.kind != "bod" else "chill ≤ 6 °C")
            row = Factory.BottleRow(title=b.label, detail=f"{kinds.get(b.kind, b.kind)} · {fixed}",
                                    key=b.id, can_fix=(b.fixed_at is None and b.kind != "bod"))
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

    def fix_bottle(self, row):
        ctl().fix_bottle(row.key)
        self.commit()
        self.show_bottles()

    def remove_bottle(self, row):
        ctl().remove_bottle(row.key)
        self.commit()
        self.show_bottles()

    def now_arrived(self):
        self.arrived_entry.text = fmt_when(ctl().now())
        self.field("arrived", self.arrived_entry.text)

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
            row = Factory.ClockRow(symbol=c.symbol, word=c.word, title=f"{c.label} · {c.kind}",
                                   where=c.where, detail=c.text, expired=c.expired, stop_id=c.stop_id)
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


class EndScreen(BaseScreen):
    cal_panel = ObjectProperty(None)
    rows_box = ObjectProperty(None)
    ended = BooleanProperty(False)

    def on_pre_enter(self, *_):
        c = ctl()
        if c.trip is None:
            return
        self.cal_panel.load(c.trip.post_check)
        self.ended = bool(c.trip.ended_at)
        self.message = ""
        self.refresh()

    def on_enter(self, *_):
        ctl().remember("end")

    def refresh(self, *_):
        self.cal_panel.update()
        self.rows_box.clear_widgets()
        lines = ctl().attention_lines()
        for line in lines:
            self.rows_box.add_widget(Factory.WrapLabel(text=line))
        if not lines:
            self.rows_box.add_widget(Factory.WrapLabel(text="✓ Nothing needs attention."))

    def end_trip(self):
        self.cal_panel.update()
        msg = ctl().end_trip()
        if msg:
            self.message = "■ Cannot end the trip: " + msg
            return
        self.ended = True
        self.message = "✓ Trip ended and saved. Send it to the hub from the sync screen."
        self.refresh()


class SyncScreen(BaseScreen):
    target_entry = ObjectProperty(None)
    rows_box = ObjectProperty(None)
    progress = NumericProperty(0)
    progress_max = NumericProperty(1)
    running = BooleanProperty(False)
    status = StringProperty("")
    last_report = ObjectProperty(None, allownone=True)

    def on_pre_enter(self, *_):
        if not self.target_entry.text:
            self.target_entry.text = ctl().prefs.sync_target
        if not self.status:
            self.status = "Trips stay on this tablet until they reach the hub. Logging goes on during sending."

    def send(self):
        target = self.target_entry.text.strip()
        if not target:
            self.status = "Hub is empty; type a folder path or an https:// WebDAV address."
            return
        if self.running:
            return
        try:
            from sync import push
        except ImportError:
            self.status = "Sending is not available in this build yet; trips stay safe on this tablet."
            return
        c = ctl()
        if target != c.prefs.sync_target:
            from dataclasses import replace

            try:
                c.save_prefs(replace(c.prefs, sync_target=target))
            except Exception:  # noqa: BLE001 - the hub is still used for this send
                pass
        c.save_now()
        self.running = True
        self.progress = 0
        self.rows_box.clear_widgets()
        self.status = f"Sending to {target} …"
        store = ctl().store
        threading.Thread(target=self._work, args=(push, store, target), daemon=True,
                         name="streamtab-sync").start()

    def _work(self, push, store, target):
        ctl().worker.flush(10)   # what was typed goes out too; waits off the UI thread
        try:
            report = push(store, target, progress=self._progress)
        except Exception as exc:  # noqa: BLE001 - shown to the person, nothing lost
            self._done(None, str(exc))
            return
        self._done(report, "")

    @mainthread
    def _progress(self, done, total, trip_id, result):
        self.progress_max = max(total, 1)
        self.progress = done
        self.status = f"Sending… {done} of {total} trips"
        self.rows_box.add_widget(Factory.WrapLabel(text=f"{RESULT_MARK.get(result, '●')} trip {trip_id[:8]}: {result}"))

    @mainthread
    def _done(self, report, error):
        self.running = False
        if error:
            self.status = f"■ Not sent — will retry: {error}"
            return
        self.progress = self.progress_max
        self.rows_box.clear_widgets()
        titles = {t.id: t.title for t in ctl().trip_lines()}
        for r in report.per_trip:
            line = f"{RESULT_MARK.get(r.result, '●')} {r.result.upper()}: {titles.get(r.trip_id, r.trip_id[:8])}"
            if r.message:
                line += f" — {r.message}"
            for c in r.conflicts:
                line += f"\n    ▲ {c}"
            self.rows_box.add_widget(Factory.WrapLabel(text=line))
        left = "" if report.failed == 0 else " — the failed ones stay on this tablet and go next time"
        self.status = (f"{'✓' if report.failed == 0 else '▲'} Sent {report.pushed} · unchanged {report.unchanged} · "
                       f"conflicts {report.conflicts} · failed {report.failed}{left}")
        self.last_report = report


RESULT_MARK = {"pushed": "✓", "unchanged": "○", "conflict": "▲", "failed": "■"}


class SettingsScreen(BaseScreen):
    temp_unit = StringProperty("C")
    pressure_unit = StringProperty("hPa")
    cond_unit = StringProperty("uS/cm")
    do_unit = StringProperty("mg/L")
    tolerance_entry = ObjectProperty(None)
    warm_entry = ObjectProperty(None)
    cold_entry = ObjectProperty(None)
    super_entry = ObjectProperty(None)
    target_entry = ObjectProperty(None)

    def choose(self, name, value):
        """A default unit picked on the settings screen (kept until Save)."""
        setattr(self, name, value)

    def on_pre_enter(self, *_):
        p = ctl().prefs
        self.temp_unit, self.pressure_unit = p.temp_unit, p.pressure_unit
        self.cond_unit, self.do_unit = p.cond_unit, p.do_unit
        self.tolerance_entry.text = f"{p.tolerance_mg_l:g}"
        self.warm_entry.text = f"{p.warm_min_mg_l:g}"
        self.cold_entry.text = f"{p.cold_min_mg_l:g}"
        self.super_entry.text = f"{p.supersaturation_percent:g}"
        self.target_entry.text = p.sync_target
        self.message = ""

    def save(self):
        from mobile.app.numeric import DecimalError, parse_decimal

        try:
            tol = parse_decimal(self.tolerance_entry.text, label="Calibration tolerance")
            warm = parse_decimal(self.warm_entry.text, label="Warm-water minimum")
            cold = parse_decimal(self.cold_entry.text, label="Cold-water minimum")
            sup = parse_decimal(self.super_entry.text, label="Supersaturation limit")
        except DecimalError as exc:
            self.message = str(exc)
            return
        checks = [("Calibration tolerance", tol, 0.01, 2.0, "mg/L"), ("Warm-water minimum", warm, 0, 15, "mg/L"),
                  ("Cold-water minimum", cold, 0, 15, "mg/L"), ("Supersaturation limit", sup, 100, 200, "%")]
        for label, v, lo, hi, unit in checks:
            if v is None or not lo <= v <= hi:
                self.message = f"{label} must be between {lo:g} and {hi:g} {unit}."
                return
        old = ctl().prefs
        prefs = AppPrefs(temp_unit=self.temp_unit, pressure_unit=self.pressure_unit,
                         cond_unit=self.cond_unit, do_unit=self.do_unit, tolerance_mg_l=tol,
                         warm_min_mg_l=warm, cold_min_mg_l=cold, supersaturation_percent=sup,
                         sync_target=self.target_entry.text.strip(), method=old.method)
        try:
            ctl().save_prefs(prefs)
        except Exception as exc:  # noqa: BLE001 - store refusals are one sentence
            self.message = f"Settings not saved: {exc}"
            return
        self.message = "✓ Settings saved."
