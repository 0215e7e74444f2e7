"""The touch app's controller: forms in, core's values and the store out (no kivy; unit-tests without a window).

Screens call these methods and show what comes back. Science comes from core (core.science.assess and
friends), records and their QC from core.store / core.rules.qc. Store writes go through a single background
worker (mobile.app.save_worker) so a slow flash card never freezes a field; sync runs in the background
through `send`. Some concerns live in their own modules and the methods here forward to them: the settings
screen and this device's prefs (mobile.app.program_prefs), the holding clocks and attention lines
(mobile.app.attention), conflicts and the office's review (mobile.app.review_steps).
"""

from __future__ import annotations

import copy
import threading
from collections.abc import Callable
from datetime import datetime
from typing import Any

from core.records.messages import when_text
from mobile.app import attention, device_files, hub_status, program_prefs, records_bridge, review_steps
from mobile.app.device_files import AppPrefs
from mobile.app.forms import BOTTLE_KINDS, FIELD_LABELS, REQUIRED_STOP_FIELDS, BottleForm, CalForm, StopForm, TripForm
from mobile.app.save_worker import SaveWorker
from mobile.app.theme import severity_mark
from mobile.app.views import (
    CalView,
    ClockLine,
    FlagLine,
    Refusal,
    StopView,
    TripLine,
    entry_action,
    error_line,
    flag_line,
    fmt_clock,
    fmt_value,
    fmt_when,
    local_now,
    parse_when,
    reading_flagged,
    target_doubt,
    zone_label,
)

__all__ = ["AppController"]


class AppController:
    """The app's state and logic. `store` is a core.store.DeviceStore (or anything with its methods)."""

    def __init__(
        self, store: Any, *, now: Callable[[], datetime] = local_now, worker: SaveWorker | None = None
    ) -> None:
        self.store = store
        self.bridge = records_bridge
        self.now = now
        self.save_errors: list[str] = []
        self.worker = worker or SaveWorker(on_error=self._save_failed)
        self.prefs = AppPrefs()
        self.trip: TripForm | None = None
        self.stop_id: str | None = None
        self._saved: dict[str, Any] = {}  # trip id -> last Trip record the store returned
        # trip id -> the form as it was when last in step with the store (what edits are told from)
        self._base_form: dict[str, TripForm] = {}
        self._rebased: dict[str, tuple[TripForm, TripForm]] = {}  # save worker -> UI thread
        self._rebase_lock = threading.Lock()
        self._sites: list[Any] | None = None
        self._other_labels: dict[str, str] | None = None
        self.load_prefs()

    # ------------------------------------------------------------------ sites, prefs, trips list
    def sites(self) -> list[Any]:
        if self._sites is None:
            self._sites = list(self.store.sites())
        return self._sites

    def site(self, site_id: str) -> Any | None:
        return next((s for s in self.sites() if s.id == site_id), None)

    def site_names(self) -> list[str]:
        return [self.bridge.site_title(s) for s in self.sites()]

    def site_id_for_title(self, title: str) -> str:
        for s in self.sites():
            if self.bridge.site_title(s) == title:
                return s.id
        return ""

    def add_site(self, code: str, name: str, elevation_text: str, water_class: str | None = None) -> str:
        """Adds a site typed on the stop screen; returns its id. Raises ValueError with one sentence."""
        code = code.strip()
        name = name.strip()
        if not code:
            raise ValueError("Site code is empty; type a short code such as LK-07.")
        if not name:
            raise ValueError("Site name is empty; type the name crews use for it.")
        from core.science.quantities import QuantityError, range_text, read

        if not (elevation_text or "").strip():
            raise ValueError(f"Elevation is empty; type the site's elevation in metres ({range_text('elevation')}).")
        try:  # core's grammar and the one table of limits (m, or ft converted)
            elevation_m = read("elevation", elevation_text, "Elevation").value
        except QuantityError as exc:
            raise ValueError(exc.message) from None
        if any(s.id == code for s in self.sites()):
            raise ValueError(f"Site code {code} is already on this tablet; pick it from the list.")
        try:
            site = self.bridge.make_site(code, name, elevation_m, water_class)
            saved = self.store.save_site(site)
        except Exception as exc:  # noqa: BLE001 - the records' own one-line message
            raise ValueError(str(exc)) from None
        self._sites = None
        return saved.id

    def program_percent_basis(self) -> str:
        """The program's meter % basis ("local" or "sea-level"), the start screen's default for a trip."""
        try:
            return str(self.settings().percent_basis)
        except Exception:  # noqa: BLE001 - an unreadable settings file: the safe default
            return "local"

    def settings(self) -> Any:
        """The program settings (core.records.models.ProgramSettings) from the store."""
        return self.store.settings()

    def settings_notice(self) -> str:
        """What the settings screen says when stored settings held values the limits now refuse."""
        return program_prefs.settings_notice(self.store)

    def load_prefs(self) -> None:
        """Units and hub from this device's app-prefs.json; method, criteria, tolerance from the program settings."""
        self.prefs = program_prefs.load_prefs(self.store)

    def save_prefs(self, prefs: AppPrefs) -> None:
        program_prefs.save_prefs(self.store, prefs, before=self.prefs)
        self.prefs = prefs

    @staticmethod
    def shown_address(target: str) -> str:
        """A hub address as a status line may show it (any user-info part removed)."""
        return program_prefs.shown_address(target)

    def save_settings_form(
        self, units: dict[str, str], limits: dict[str, str], sync_target: str, percent_basis: str | None = None
    ) -> str | None:
        """Saves the settings screen (units, the program limits as typed, the meters' % basis, the hub);
        returns a refusal or None.

        `limits` maps each SETTING_FIELDS name to its text; `percent_basis` is "local" or "sea-level"
        (None keeps the program's). Nothing is saved when one entry is refused.
        """
        prefs, problem = program_prefs.prefs_from_form(self.prefs, units, limits, sync_target, percent_basis)
        if prefs is None:
            return problem
        try:
            self.save_prefs(prefs)
        except Exception as exc:  # noqa: BLE001 - store refusals are one sentence
            return f"Settings not saved: {exc}"
        return None

    def sync_states(self) -> dict[str, str]:
        """trip id -> "synced" / "changed" / "never pushed" from the sync outbox (empty without sync)."""
        try:
            import sync

            return {s.trip_id: s.state for s in sync.status(self.store)}
        except Exception:  # noqa: BLE001 - the list still shows without sync state
            return {}

    def sync_overview(self) -> Any:
        """Where each trip on this tablet stands with the hub (mobile.app.hub_status.HubOverview)."""
        return hub_status.overview(self)

    def send_result(self, report: Any, titles: dict[str, str]) -> Any:
        """What a finished send did, as text (mobile.app.hub_status.send_result); `titles` from sync_overview."""
        return hub_status.send_result(report, titles)

    @staticmethod
    def send_progress_line(trip_id: str, result: str) -> str:
        return hub_status.progress_line(trip_id, result)

    def send(
        self, target: str, *, progress: Callable[..., None], on_done: Callable[[Any, BaseException | None], None]
    ) -> str | None:
        """Sends every trip to the hub `target` in the background; returns a refusal, or None once started.

        The hub becomes this tablet's default. What was typed is saved first: the push waits for
        the save worker off the UI thread. `progress` and `on_done` are called from the sync thread.
        """
        import sync

        if not target:
            return "Hub is empty; type a folder path or an https:// WebDAV address."
        problem = program_prefs.hub_problem(target)
        if problem:
            return problem
        if target != self.prefs.sync_target:
            from dataclasses import replace

            try:
                self.save_prefs(replace(self.prefs, sync_target=target))
            except Exception:  # noqa: BLE001 - the hub is still used for this send
                pass
        self.save_now()

        def push_after_saves(store: Any, address: str, **kwargs: Any) -> Any:
            self.worker.flush(10)  # what was typed goes out too
            return sync.push(store, address, **kwargs)

        sync.run_in_background(push_after_saves, self.store, target, progress=progress, on_done=on_done)
        return None

    def trip_lines(self) -> list[TripLine]:
        """One line per trip; trips the office returned come first, with its reasons."""
        from core.rules.review import describe, review_state

        lines, returned = [], []
        synced = self.sync_states()
        for t in self.store.list_trips():
            started = when_text(t.started_at)
            crew = ", ".join(t.crew) if isinstance(t.crew, list) else str(t.crew or "")
            title = f"{t.program or 'Trip'} · {crew or '—'}"
            status = {"in progress": "open"}.get(t.status, t.status)
            if status == "ended" and synced.get(t.id) == "synced":
                status = "synced"
            elif status == "ended":
                status = "ended, not sent"
            detail = f"{started} · {t.stop_count} stop{'s' if t.stop_count != 1 else ''}"
            state = t.review_state
            if state is None or state == "returned":  # None: a summary from an older build
                doc = self.store.trip_document(t.id)
                state = review_state(doc)
                if state == "returned":
                    why = describe(doc)
                    returned.append(
                        TripLine(t.id, title, "returned by the office", f"{detail}\n{why[:1].upper()}{why[1:]}")
                    )
                    continue
            if state in ("reviewed", "approved"):
                status = state
            lines.append(TripLine(t.id, title, status, detail))
        return returned + lines

    def open_trip_id(self) -> str | None:
        open_ = [t for t in self.store.list_trips() if not t.ended_at]
        open_.sort(key=lambda s: str(s.updated_at or s.started_at), reverse=True)
        return open_[0].id if open_ else None

    # ------------------------------------------------------------------ where the app was
    def remember(self, screen: str) -> None:
        device_files.write_state(self.store.data_dir, self.trip.id if self.trip else None, self.stop_id, screen)

    def resume_point(self) -> tuple[str, str | None]:
        """Opens the trip and stop the app was on (or the open trip) and returns (screen, stop_id)."""
        doc = device_files.read_state(self.store.data_dir)
        trip_id = doc.get("trip_id") or self.open_trip_id()
        if not trip_id:
            return "trips", None
        try:
            self.open_trip(trip_id)
        except Exception:  # noqa: BLE001 - an unreadable trip: start from the trip list, the store reports it
            return "trips", None
        if self.trip.ended_at:
            return "trips", None
        stop_id = doc.get("stop_id")
        if stop_id and self.trip.stop(stop_id):
            self.stop_id = stop_id
        else:
            open_stops = [s for s in self.trip.stops if not s.closed]
            self.stop_id = open_stops[-1].id if open_stops else None
        screen = doc.get("screen") or "stop"
        if screen not in ("stop", "bottles", "end", "start"):
            screen = "stop"
        if screen == "stop" and not self.stop_id:
            screen = "start" if not self.trip.stops else "bottles"
        return screen, self.stop_id

    # ------------------------------------------------------------------ trip lifecycle
    def default_program(self) -> str:
        """The program a new trip starts with: the program settings', else the latest trip's."""
        try:
            if self.settings().program:
                return self.settings().program
        except Exception:  # noqa: BLE001 - unreadable settings: fall back to the trips
            pass
        trips = self.store.list_trips()
        return trips[0].program if trips else ""

    def new_trip_form(self) -> TripForm:
        form = TripForm()
        form.pre_cal.temp_unit = self.prefs.temp_unit
        form.pre_cal.pressure_unit = self.prefs.pressure_unit
        form.post_check.temp_unit = self.prefs.temp_unit
        form.post_check.pressure_unit = self.prefs.pressure_unit
        return form

    def cal_problem(self, cal: CalForm, kind: str = "pre-trip") -> str | None:
        """Why a calibration form cannot be stored as it is (a field empty or refused), or None."""
        return self.bridge.cal_document(cal, kind, self.prefs.tolerance_mg_l)[1]

    def start_trip(self, form: TripForm, *, without_calibration: bool = False) -> Refusal | None:
        """Starts the trip in `form`; returns why not, as a Refusal saying where to look.

        A pre-trip calibration with an empty or refused field is refused (never dropped); with no
        calibration at all the crew must say so (`without_calibration`), and the trip records it.
        """
        for name in ("program", "crew", "meter_id"):
            if not getattr(form, name).strip():
                return Refusal(f"{FIELD_LABELS[name]} is empty; type it before starting the trip.")
        problem = self.cal_problem(form.pre_cal)
        if problem:
            return Refusal(f"Pre-trip calibration: {problem}", "calibration")
        empty = not any(
            (form.pre_cal.temp_text.strip(), form.pre_cal.pressure_text.strip(), form.pre_cal.reading_text.strip())
        )
        if empty and not without_calibration:
            return Refusal(
                "No pre-trip calibration is entered. Type it in the calibration panel, or tap "
                "“Start without calibration” to record that this trip has none.",
                "no calibration",
            )
        form.started_without_calibration = empty
        form.started_at = form.started_at or self.now()
        self.trip = form
        self.stop_id = None
        self._other_labels = None
        self.save_now(
            wait=True, change="trip started" + (" without calibration" if form.started_without_calibration else "")
        )
        return None

    def open_trip(self, trip_id: str) -> TripForm:
        self.worker.flush()  # a save still on its way would make the loaded copy stale
        model = self.store.load_trip(trip_id)
        self._saved[trip_id] = model
        self._other_labels = None
        self.trip = self.bridge.form_from_trip(model)
        self._base_form[trip_id] = copy.deepcopy(self.trip)
        self.stop_id = None
        return self.trip

    def end_trip(self) -> Refusal | None:
        """Ends the open trip (closing its stops); returns why not, as a Refusal saying where to look."""
        if self.trip is None:
            return Refusal("No trip is open.")
        problem = self.cal_problem(self.trip.post_check, "post-trip")
        if problem:
            return Refusal(f"Post-trip check: {problem}", "calibration")
        still_open = [s for s in self.trip.stops if not s.closed]
        for s in still_open:
            msg = self.close_problem(s)
            if msg:
                return Refusal(f"Stop {self.stop_number(s)}: {msg}")
        for s in still_open:
            s.closed = True
            s.closed_at = self.now()
        self.trip.ended_at = self.now()
        self.save_now(wait=True, change="trip ended")
        return None

    # ------------------------------------------------------------------ stops
    @property
    def stop(self) -> StopForm | None:
        return self.trip.stop(self.stop_id) if (self.trip and self.stop_id) else None

    def stop_number(self, stop: StopForm) -> int:
        return self.trip.stops.index(stop) + 1 if self.trip else 0

    def new_stop(self) -> StopForm:
        stop = StopForm(
            arrived_at=self.now(),
            temp_unit=self.prefs.temp_unit,
            pressure_unit=self.prefs.pressure_unit,
            cond_unit=self.prefs.cond_unit,
            do_unit=self.prefs.do_unit,
        )
        self.trip.stops.append(stop)
        self.stop_id = stop.id
        self.save_later()
        return stop

    def set_stop_field(self, name: str, value: Any) -> StopView:
        """Sets one stop field (text as typed, a unit, a site) and returns what the screen should show."""
        stop = self.stop
        if name == "arrived_now":
            stop.arrived_at = self.now()
        elif name == "arrived":
            if stop.arrived_at is not None and (value or "").strip() == fmt_when(stop.arrived_at):
                return self.stop_view()  # shown as it is stored: nothing changed (seconds kept)
            try:
                stop.arrived_at = parse_when(value, stop.arrived_at)
            except ValueError:
                view = self.stop_view()
                msg = f"Arrival time “{value}” is not readable; type HH:MM (24 h) or YYYY-MM-DD HH:MM."
                view.errors["arrived"] = msg
                view.flags.insert(0, error_line(msg, "arrived"))
                return view
        elif name == "site":
            stop.site_id = value
        else:
            attr = {
                "temp": "temp_text",
                "temp_unit": "temp_unit",
                "pressure": "pressure_text",
                "pressure_unit": "pressure_unit",
                "conductivity": "cond_text",
                "cond_unit": "cond_unit",
                "cond_is_sc25": "cond_is_sc25",
                "do": "do_text",
                "do_unit": "do_unit",
                "notes": "notes",
            }[name]
            setattr(stop, attr, value)
        self.save_later()
        return self.stop_view()

    def arrival_zone(self) -> str:
        """Which clock the open stop's arrival time is in (its UTC offset), for the field's label."""
        stop = self.stop
        return zone_label(stop.arrived_at if stop is not None else None, self.now())

    def bottle_detail(self, bottle: BottleForm) -> str:
        """A bottle row's second part: its kind and when it was fixed (with the offset when the tablet's differs)."""
        kind = dict(BOTTLE_KINDS).get(bottle.kind, bottle.kind)
        if bottle.fixed_at is not None:
            return f"{kind} · fixed {fmt_clock(bottle.fixed_at, self.now())}"
        return f"{kind} · " + ("not fixed" if bottle.kind != "bod" else "chill ≤ 6 °C")

    # ------------------------------------------------------------------ derived values
    def _saved_stop_doc(self, stop_id: str) -> dict[str, Any] | None:
        saved = self._saved.get(self.trip.id) if self.trip else None
        if saved is None:
            return None
        for s in saved.stops:
            if s.id == stop_id:
                return s.model_dump(mode="json")
        return None

    def stop_record(self, stop: StopForm) -> tuple[Any, dict[str, str]]:
        """(core.records.models.Stop with derived values, or None without a site; refusals by field)."""
        from core.rules.qc import checked_site, derive_stop

        record, errors = self.bridge.stop_record(stop, self._saved_stop_doc(stop.id))
        if record is None:
            return None, errors
        live = self.site(stop.site_id)
        site = checked_site(record, {record.site_id: live} if live is not None else {})
        basis = self.trip.meter_percent_basis if self.trip is not None else None
        derived = derive_stop(record, site, self.settings(), basis)
        return record.model_copy(update={"derived": derived}), errors

    def stop_view(self, stop: StopForm | None = None) -> StopView:
        from collections import Counter

        from core.rules.qc import checked_site, stop_flags

        stop = stop or self.stop
        view = StopView()
        if stop is None:
            return view
        record, errors = self.stop_record(stop)
        view.errors = errors
        units = {"temp": stop.temp_unit, "pressure": stop.pressure_unit, "conductivity": stop.cond_unit}
        units["do"] = stop.do_unit
        lines: list[FlagLine] = [error_line(m, k, entry_action(k, units.get(k, ""))) for k, m in errors.items()]
        if record is None:
            if not stop.site_id:
                sym, _word = severity_mark("note")
                lines.insert(
                    0,
                    FlagLine(
                        "input.site",
                        "note",
                        sym,
                        "PICK SITE",
                        "Pick the site first: its elevation checks the pressure, its water class the criteria.",
                        "",
                    ),
                )
            view.flags = lines
            return view
        live = self.site(stop.site_id)
        site = checked_site(record, {record.site_id: live} if live is not None else {})
        d = record.derived
        if d is not None:
            view.assessment = d
            view.sat_text = fmt_value(d.do_sat_mg_l, 2, "mg/L")
            view.percent_text = fmt_value(d.percent_saturation, 1, "%")
            view.do_text = fmt_value(d.do_mg_l, 2, "mg/L")
            source = {"given": "as given", "conductivity": "from conductivity", "default": "fresh water"}.get(
                d.salinity_source, d.salinity_source
            )
            view.salinity_text = f"{d.salinity:.2f} ({source})"
        labels = Counter(b.label for s in self.trip.stops for b in s.bottles)
        prev = self._previous_record(stop)
        flags = stop_flags(
            record,
            self.settings(),
            self.now(),
            site=site,
            previous=prev,
            labels_in_trip=labels,
            other_bottle_labels=self.labels_elsewhere(),
            trip_id=self.trip.id,
            sites_known=True,
        )
        flags = sorted(flags, key=lambda f: -f.severity.rank)
        view.target_doubt = target_doubt(flags)
        view.reading_flagged = reading_flagged(flags)
        lines.extend(flag_line(f) for f in flags)
        view.flags = lines
        return view

    def _previous_record(self, stop: StopForm) -> Any:
        route = sorted((s for s in self.trip.stops if s.arrived_at), key=lambda s: s.arrived_at)
        before = None
        for s in route:
            if s.id == stop.id:
                break
            before = s
        if before is None:
            return None
        rec, _ = self.bridge.stop_record(before, self._saved_stop_doc(before.id))
        return rec

    # ------------------------------------------------------------------ closing a stop
    def close_problem(self, stop: StopForm) -> str | None:
        filled = {
            "site": bool(stop.site_id),
            "arrived": stop.arrived_at is not None,
            "temp": bool(stop.temp_text.strip()),
            "pressure": bool(stop.pressure_text.strip()),
            "do": bool(stop.do_text.strip()),
        }
        missing = [FIELD_LABELS[name] for name in REQUIRED_STOP_FIELDS if not filled[name]]
        if missing:
            return (
                f"{', '.join(missing)} {'is' if len(missing) == 1 else 'are'} empty; "
                "fill in every required field before closing the stop."
            )
        errors = self.bridge.stop_problems(stop)
        if errors:
            return next(iter(errors.values()))
        return None

    def close_stop(self) -> str | None:
        stop = self.stop
        if stop is None:
            return "No stop is open."
        msg = self.close_problem(stop)
        if msg:
            return msg
        stop.closed = True
        stop.closed_at = self.now()
        self.save_now(wait=False, change="stop closed")
        return None

    def reopen_stop(self) -> None:
        if self.stop is not None:
            self.stop.closed = False
            self.stop.closed_at = None
            self.save_later()

    # ------------------------------------------------------------------ bottles
    def labels_elsewhere(self) -> dict[str, str]:
        """Bottle labels used by other trips on this device (label -> trip id)."""
        if self._other_labels is None:
            try:
                used = dict(self.store.bottle_labels_in_use())
            except Exception:  # noqa: BLE001 - the duplicate-label check is advisory; the save still runs
                used = {}
            self._other_labels = {k: v for k, v in used.items() if not self.trip or v != self.trip.id}
        return self._other_labels

    def add_bottle(self, label: str, kind: str, fixed: bool) -> str | None:
        """Adds a bottle to the current stop; returns the refusal as one sentence, or None."""
        label = (label or "").strip()
        stop = self.stop
        if stop is None:
            return "Open a stop before adding bottles."
        if not label:
            return "Bottle ID is empty; type it or scan the bottle's barcode."
        if kind not in dict(BOTTLE_KINDS):
            return f"Bottle kind “{kind}” is not one of {', '.join(w for _, w in BOTTLE_KINDS)}."
        key = label.casefold()
        for s in self.trip.stops:
            for b in s.bottles:
                if b.label.casefold() == key:
                    where = "this stop" if s is stop else f"stop {self.stop_number(s)}"
                    return (
                        f"Bottle ID {label} is already used at {where} of this trip; "
                        "each bottle needs its own ID — check the label or scan again."
                    )
        other = {k.casefold(): v for k, v in self.labels_elsewhere().items()}
        if key in other:
            return (
                f"Bottle ID {label} is already used in another trip on this tablet "
                f"(trip {other[key][:8]}); each bottle needs its own ID — check the label."
            )
        now = self.now()
        stop.bottles.append(
            BottleForm(label=label, kind=kind, collected_at=now, fixed_at=now if (fixed and kind != "bod") else None)
        )
        self.save_later()
        return None

    def fix_bottle(self, bottle_id: str) -> None:
        for s in self.trip.stops:
            for b in s.bottles:
                if b.id == bottle_id and b.fixed_at is None:
                    b.fixed_at = self.now()
        self.save_later()

    def remove_bottle(self, bottle_id: str) -> None:
        for s in self.trip.stops:
            s.bottles = [b for b in s.bottles if b.id != bottle_id]
        self.save_later()

    def clock_lines(self, now: datetime | None = None) -> list[ClockLine]:
        """Every bottle's holding-time clock in the open trip, most urgent first (mobile.app.attention)."""
        return attention.clock_lines(self, now)

    # ------------------------------------------------------------------ calibration helper
    def cal_view(self, cal: CalForm, post: bool = False) -> CalView:
        from core.records.models import InputError
        from core.science import calibration

        view = CalView()
        if not (cal.temp_text.strip() and cal.pressure_text.strip()):
            view.detail = "Type the calibration temperature and station pressure to see the 100 % target."
            return view
        try:
            tq, pq = self.bridge.cal_conditions(cal)
            t, p = tq.value, pq.value
            target = float(calibration.calibration_target_mg_l(t, p, method=self.prefs.method))
            view.target_text = fmt_value(target, 2, "mg/L")
            if not cal.reading_text.strip():
                view.detail = "Type the meter's reading in water-saturated air."
                return view
            r = self.bridge.cal_reading(cal)
            fn = calibration.post_trip_check if post else calibration.check_calibration
            res = fn(r, t, p, tolerance_mg_l=self.prefs.tolerance_mg_l, method=self.prefs.method)
        except InputError as exc:
            view.detail = exc.message
            return view
        except ValueError as exc:
            view.detail = str(exc)
            return view
        view.result = res
        view.verdict = "PASS" if res.passed else "FAIL"
        view.detail = (
            f"Reading {res.reading_mg_l:.2f} mg/L is {res.difference_mg_l:+.2f} mg/L from the target "
            f"(tolerance ±{res.tolerance_mg_l:.2f} mg/L)."
        )
        if not res.passed:
            view.detail += (
                " Readings of this trip may have drifted: note it and tell your QA lead."
                if post
                else " Recalibrate the meter per your SOP, then check again."
            )
        if cal.at is None:
            cal.at = self.now()
        return view

    def attention_lines(self) -> list[str]:
        """What needs attention before or after ending the trip, as lines with symbol and word."""
        return attention.attention_lines(self)

    # ------------------------------------------------------------------ conflicts and the office's review
    def conflicts(self) -> list[Any]:
        """The open trip's open conflicts as people read them (mobile.app.review_steps)."""
        return review_steps.conflicts(self)

    def settle_conflict(self, conflict_id: str, keep: int) -> str | None:
        """Settles one open conflict by keeping its `keep`-th value; returns why not, or None."""
        return review_steps.settle_conflict(self, conflict_id, keep)

    def returned_reasons(self) -> str | None:
        """Why the office returned the open trip (a sentence), or None when it is not returned."""
        return review_steps.returned_reasons(self)

    def resubmit(self) -> str | None:
        """Hands a trip the office returned back to it; returns why not in one sentence, or None."""
        return review_steps.resubmit(self)

    def _adopt_stored(self, stored: Any) -> None:
        """UI thread: the form shows `stored` (the trip as just read or written), on the same stop."""
        stop_id = self.stop_id
        self._saved[stored.id] = stored
        self.trip = self.bridge.form_from_trip(stored)
        self._base_form[stored.id] = copy.deepcopy(self.trip)
        self.stop_id = stop_id if stop_id and self.trip.stop(stop_id) else None

    # ------------------------------------------------------------------ saving
    def _save_failed(self, exc: BaseException) -> None:
        # worker thread: keep the message for the screen and mark the form unsaved so the next
        # trigger (or on_pause) writes it again; the form itself is still in memory
        self.save_errors.append(str(exc) or type(exc).__name__)
        self.dirty = True

    def take_save_errors(self) -> list[str]:
        errors, self.save_errors = self.save_errors, []
        return errors

    def save_later(self) -> None:
        """Marks the trip changed; the screen's debounce trigger calls save_now()."""
        self.dirty = True

    dirty = False

    def save_now(self, *, wait: bool = False, change: str = "field edited") -> None:
        """Snapshots the form and hands it to the save worker (or waits for it, `wait`)."""
        if self.trip is None:
            return
        snapshot = copy.deepcopy(self.trip)
        self.dirty = False

        def job() -> None:
            from core.store import StaleTrip

            previous = self._saved.get(snapshot.id)
            try:
                saved = self.store.save_trip(self.bridge.trip_from_form(snapshot, previous, self), change)
                self._base_form[snapshot.id] = snapshot
            except StaleTrip:
                # changed by another writer (a sync merge, the office's settlement): only what was
                # edited here since the form was last in step with the store goes on the stored trip,
                # read and written under the store's lock so no third writer can come between
                with self.store.locked():
                    stored = self.store.load_trip(snapshot.id)
                    base = self._base_form.get(snapshot.id)
                    merged = (
                        self.bridge.rebase_form(snapshot, base, self.bridge.form_from_trip(stored))
                        if base is not None
                        else snapshot
                    )
                    saved = self.store.save_trip(self.bridge.trip_from_form(merged, stored, self), change)
                self._base_form[snapshot.id] = merged
                with self._rebase_lock:
                    self._rebased[snapshot.id] = (snapshot, merged)
            self._saved[snapshot.id] = saved

        self.worker.submit(snapshot.id, job)
        if wait:
            self.worker.flush()

    def flush(self, timeout: float = 10.0) -> bool:
        if self.dirty:
            self.save_now()
        return self.worker.flush(timeout)

    def adopt_rebased(self) -> bool:
        """UI thread: after a save was put on a trip another writer changed, the form shows the
        merged values too (edits made since that save stay). True when the form changed."""
        with self._rebase_lock:
            pending = self._rebased.pop(self.trip.id, None) if self.trip is not None else None
            self._rebased.clear()
        if pending is None:
            return False
        snapshot, merged = pending
        self.trip = self.bridge.rebase_form(self.trip, snapshot, merged)
        return True

    def refresh_from_store(self) -> bool:
        """UI thread, after a sync: when nothing typed is waiting and the stored trip moved on (a
        merge), the form shows the stored trip. True when the form was reloaded."""
        if self.trip is None or self.dirty or not self.worker.flush(0):
            return False
        saved = self._saved.get(self.trip.id)
        stored = self.store.load_trip(self.trip.id)
        if saved is not None and stored.revision == saved.revision:
            return False
        self._adopt_stored(stored)
        return True
