"""The touch app's logic: forms in, core's values and the store out (no kivy; unit-tests without a window).

Screens call these methods and show what comes back. Science comes from core (core.science.assess and
friends), records and their QC from core.store / core.rules.qc, bottle clocks from core.science.holding. Store
writes go through a single background worker so a slow flash card never freezes a field.
"""
from __future__ import annotations

import json
import queue
import threading
import copy
from dataclasses import dataclass, field
from datetime import datetime, timedelta, timezone
from pathlib import Path
from typing import Any, Callable

from core.science.winkler import SAFETY_NOTE
from mobile.app.forms import (BOTTLE_KINDS, FIELD_LABELS, REQUIRED_STOP_FIELDS, BottleForm,
                              CalForm, StopForm, TripForm)
from mobile.app.numeric import parse_decimal
from mobile.app.theme import severity_mark

__all__ = ["AppController", "StopView", "FlagLine", "CalView", "ClockLine", "TripLine",
           "SaveWorker", "AppPrefs", "WADING_CAUTION", "REAGENT_CAUTION"]

WADING_CAUTION = ("Wading: enter the water only where your program's SOP allows — never alone, "
                  "never in fast or rising water, wearing a PFD where required.")
REAGENT_CAUTION = SAFETY_NOTE  # the one reagent caution (core.science.winkler)

APP_STATE_FILE = "app-state.json"   # where the app was (trip, stop, screen) — UI cursor, not data
APP_PREFS_FILE = "app-prefs.json"
# Which holding-time rule (core.science.holding) a bottle kind follows. Duplicates and blanks of the DO
# sampling are fixed like their parent Winkler bottles (common practice).
HOLDING_RULE = {"do_fixed": "do_winkler", "duplicate": "do_winkler", "blank": "do_winkler", "bod": "bod"}   # this device's default units and hub address


def _local_now() -> datetime:
    return datetime.now(timezone.utc).astimezone()


@dataclass
class FlagLine:
    """A flag as the screen shows it: symbol and word for the severity, message, action."""

    code: str
    severity: str
    symbol: str
    word: str
    message: str
    action: str

    @property
    def text(self) -> str:
        tail = f" — {self.action}" if self.action else ""
        return f"{self.symbol} {self.word}: {self.message}{tail}"


def flag_line(flag: Any) -> FlagLine:
    sev = getattr(flag.severity, "value", flag.severity)
    symbol, word = severity_mark(sev)
    return FlagLine(flag.code, str(sev), symbol, word, flag.message, flag.action or "")


def _error_line(message: str, field_name: str = "") -> FlagLine:
    symbol, word = severity_mark("stop-and-check")
    return FlagLine(f"input.{field_name or 'value'}", "stop-and-check", symbol, "CHECK ENTRY",
                    message, "")


@dataclass
class StopView:
    """Everything the stop screen shows beside the form, already as text."""

    sat_text: str = "—"
    percent_text: str = "—"
    do_text: str = "—"
    salinity_text: str = "—"
    flags: list[FlagLine] = field(default_factory=list)
    errors: dict[str, str] = field(default_factory=dict)
    assessment: Any = None


@dataclass
class CalView:
    target_text: str = "—"
    verdict: str = ""          # "PASS" | "FAIL" | ""
    detail: str = ""
    result: Any = None


@dataclass
class ClockLine:
    stop_id: str
    label: str
    kind: str
    where: str
    remaining_s: float
    expired: bool
    text: str
    symbol: str
    word: str


@dataclass
class TripLine:
    id: str
    title: str
    status: str        # words: "open", "ended", "synced", "needs attention"
    detail: str


@dataclass
class AppPrefs:
    """Per-device defaults the settings screen edits (kept in the store's program settings when it can)."""

    temp_unit: str = "C"
    pressure_unit: str = "hPa"
    cond_unit: str = "uS/cm"
    do_unit: str = "mg/L"
    tolerance_mg_l: float = 0.2
    warm_min_mg_l: float = 5.0
    cold_min_mg_l: float = 6.5
    supersaturation_percent: float = 120.0
    sync_target: str = ""
    method: str = "benson-krause"


class SaveWorker:
    """One background thread that runs store writes in order; a newer job for a trip replaces a waiting one."""

    def __init__(self, on_error: Callable[[BaseException], None] | None = None) -> None:
        self._q: "queue.Queue[tuple[str, Callable[[], Any]] | None]" = queue.Queue()
        self._pending: dict[str, Callable[[], Any]] = {}
        self._lock = threading.Lock()
        self._idle = threading.Event()
        self._idle.set()
        self._on_error = on_error
        self._thread = threading.Thread(target=self._run, name="streamtab-save", daemon=True)
        self._thread.start()
        self.saves_done = 0

    def submit(self, key: str, job: Callable[[], Any]) -> None:
        with self._lock:
            fresh = key not in self._pending
            self._pending[key] = job
            self._idle.clear()
        if fresh:
            self._q.put((key, None))  # type: ignore[arg-type]

    def _run(self) -> None:
        while True:
            item = self._q.get()
            if item is None:
                return
            key, _ = item
            with self._lock:
                job = self._pending.pop(key, None)
            if job is not None:
                try:
                    job()
                    self.saves_done += 1
                except BaseException as exc:  # reported to the screen; the worker keeps going
                    if self._on_error:
                        self._on_error(exc)
            with self._lock:
                if not self._pending:
                    self._idle.set()

    def flush(self, timeout: float = 10.0) -> bool:
        """Waits until every submitted write has finished (on pause, on stop, in tests)."""
        return self._idle.wait(timeout)

    def close(self, timeout: float = 10.0) -> None:
        self.flush(timeout)
        self._q.put(None)
        self._thread.join(timeout)


def _fmt(value: float | None, digits: int, unit: str = "") -> str:
    if value is None:
        return "—"
    return f"{value:.{digits}f}" + (f" {unit}" if unit else "")


def parse_when(text: str, base: datetime | None) -> datetime:
    """Reads "HH:MM" (same day as `base`) or "YYYY-MM-DD HH:MM" as a local, timezone-aware time."""
    s = (text or "").strip()
    tz = (base or _local_now()).tzinfo or _local_now().tzinfo
    for fmt in ("%Y-%m-%d %H:%M", "%Y-%m-%dT%H:%M", "%Y-%m-%d %H:%M:%S"):
        try:
            return datetime.strptime(s, fmt).replace(tzinfo=tz)
        except ValueError:
            pass
    try:
        t = datetime.strptime(s, "%H:%M")
    except ValueError:
        raise ValueError(f"Time “{s}” is not readable; type HH:MM (24 h) or YYYY-MM-DD HH:MM.") from None
    day = (base or _local_now()).astimezone(tz)
    return day.replace(hour=t.hour, minute=t.minute, second=0, microsecond=0)


def fmt_when(when: datetime | None) -> str:
    if when is None:
        return ""
    return when.astimezone().strftime("%Y-%m-%d %H:%M")


def fmt_duration(seconds: float) -> str:
    s = int(abs(seconds))
    d, rem = divmod(s, 86400)
    h, rem = divmod(rem, 3600)
    m = rem // 60
    if d:
        return f"{d} d {h} h"
    if h:
        return f"{h} h {m:02d} min"
    return f"{m} min"


class AppController:
    """The app's state and logic. `store` is a core.store.DeviceStore (or anything with its methods)."""

    def __init__(self, store: Any, *, now: Callable[[], datetime] = _local_now,
                 worker: SaveWorker | None = None) -> None:
        from mobile.app import records_bridge

        self.store = store
        self.bridge = records_bridge
        self.now = now
        self.save_errors: list[str] = []
        self.worker = worker or SaveWorker(on_error=self._save_failed)
        self.prefs = AppPrefs()
        self.trip: TripForm | None = None
        self.stop_id: str | None = None
        self._saved: dict[str, Any] = {}      # trip id -> last Trip record the store returned
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
        elevation_m = parse_decimal(elevation_text, label="Elevation")
        if elevation_m is None:
            raise ValueError("Elevation is empty; type the site's elevation in metres (−400 to 5000).")
        if not -400 <= elevation_m <= 5000:
            raise ValueError(f"Elevation {elevation_m:g} m is outside −400 to 5000 m; type it in metres.")
        if any(s.id == code for s in self.sites()):
            raise ValueError(f"Site code {code} is already on this tablet; pick it from the list.")
        try:
            site = self.bridge.make_site(code, name, elevation_m, water_class)
            saved = self.store.save_site(site)
        except Exception as exc:  # noqa: BLE001 - the records' own one-line message
            raise ValueError(str(exc)) from None
        self._sites = None
        return saved.id

    def _prefs_path(self) -> Path:
        return Path(self.store.data_dir) / APP_PREFS_FILE

    def settings(self) -> Any:
        """The program settings (core.records.models.ProgramSettings) from the store."""
        return self.store.settings()

    def load_prefs(self) -> None:
        """Units and hub from this device's app-prefs.json; method, criteria, tolerance from the program settings."""
        from mobile.app.records_bridge import load_json

        d = load_json(self._prefs_path())
        prefs = AppPrefs(**{k: v for k, v in d.items() if k in AppPrefs.__dataclass_fields__})
        try:
            st = self.store.settings()
            prefs.method = st.method
            prefs.warm_min_mg_l = st.warm_min_mg_l
            prefs.cold_min_mg_l = st.cold_min_mg_l
            prefs.supersaturation_percent = st.supersaturation_percent
            prefs.tolerance_mg_l = st.calibration_tolerance_mg_l
        except Exception:  # noqa: BLE001 - unreadable settings: keep the defaults, the store reports it
            pass
        self.prefs = prefs

    def save_prefs(self, prefs: AppPrefs) -> None:
        from dataclasses import asdict

        from core.store.atomic import atomic_write_bytes

        st = self.store.settings().model_copy(update={
            "warm_min_mg_l": prefs.warm_min_mg_l, "cold_min_mg_l": prefs.cold_min_mg_l,
            "supersaturation_percent": prefs.supersaturation_percent,
            "calibration_tolerance_mg_l": prefs.tolerance_mg_l, "method": prefs.method})
        self.store.save_settings(st)
        local = {k: v for k, v in asdict(prefs).items()
                 if k in ("temp_unit", "pressure_unit", "cond_unit", "do_unit", "sync_target")}
        atomic_write_bytes(self._prefs_path(), json.dumps(local, indent=1).encode())
        self.prefs = prefs

    def sync_states(self) -> dict[str, str]:
        """trip id -> "synced" / "changed" / "never pushed" from the sync outbox (empty without sync)."""
        try:
            import sync

            return {s.trip_id: s.state for s in sync.status(self.store)}
        except Exception:  # noqa: BLE001 - the list still shows without sync state
            return {}

    def trip_lines(self) -> list[TripLine]:
        lines = []
        synced = self.sync_states()
        for t in self.store.list_trips():
            try:
                started = fmt_when(datetime.fromisoformat(t.started_at))
            except (TypeError, ValueError):
                started = str(t.started_at or "")
            crew = ", ".join(t.crew) if isinstance(t.crew, list) else str(t.crew or "")
            title = f"{t.program or 'Trip'} · {crew or '—'}"
            status = {"in progress": "open"}.get(t.status, t.status)
            if status == "ended" and synced.get(t.id) == "synced":
                status = "synced"
            elif status == "ended":
                status = "ended, not sent"
            lines.append(TripLine(t.id, title, status,
                                  f"{started} · {t.stop_count} stop{'s' if t.stop_count != 1 else ''}"))
        return lines

    def open_trip_id(self) -> str | None:
        open_ = [t for t in self.store.list_trips() if not t.ended_at]
        open_.sort(key=lambda s: str(s.updated_at or s.started_at), reverse=True)
        return open_[0].id if open_ else None

    # ------------------------------------------------------------------ where the app was
    def _state_path(self) -> Path:
        return Path(self.store.data_dir) / APP_STATE_FILE

    def remember(self, screen: str) -> None:
        from core.store.atomic import atomic_write_bytes

        doc = {"trip_id": self.trip.id if self.trip else None, "stop_id": self.stop_id, "screen": screen}
        try:
            atomic_write_bytes(self._state_path(), json.dumps(doc).encode())
        except OSError:
            pass

    def resume_point(self) -> tuple[str, str | None]:
        """Opens the trip and stop the app was on (or the open trip) and returns (screen, stop_id)."""
        try:
            doc = json.loads(self._state_path().read_text())
        except (OSError, ValueError):
            doc = {}
        trip_id = doc.get("trip_id") or self.open_trip_id()
        if not trip_id:
            return "trips", None
        try:
            self.open_trip(trip_id)
        except Exception:
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

    def start_trip(self, form: TripForm) -> str | None:
        """Starts the trip in `form`; returns a one-line message when something required is missing."""
        for name in ("program", "crew", "meter_id"):
            if not getattr(form, name).strip():
                return f"{FIELD_LABELS[name]} is empty; type it before starting the trip."
        form.started_at = form.started_at or self.now()
        self.trip = form
        self.stop_id = None
        self._other_labels = None
        self.save_now(wait=True, change="trip started")
        return None

    def open_trip(self, trip_id: str) -> TripForm:
        self.worker.flush()   # a save still on its way would make the loaded copy stale
        model = self.store.load_trip(trip_id)
        self._saved[trip_id] = model
        self._other_labels = None
        self.trip = self.bridge.form_from_trip(model)
        self.stop_id = None
        return self.trip

    def end_trip(self) -> str | None:
        if self.trip is None:
            return "No trip is open."
        still_open = [s for s in self.trip.stops if not s.closed]
        for s in still_open:
            msg = self.close_problem(s)
            if msg:
                return f"Stop {self.stop_number(s)}: {msg}"
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
        stop = StopForm(arrived_at=self.now(), temp_unit=self.prefs.temp_unit,
                        pressure_unit=self.prefs.pressure_unit, cond_unit=self.prefs.cond_unit,
                        do_unit=self.prefs.do_unit)
        self.trip.stops.append(stop)
        self.stop_id = stop.id
        self.save_later()
        return stop

    def set_stop_field(self, name: str, value: Any) -> StopView:
        """Sets one stop field (text as typed, a unit, a site) and returns what the screen should show."""
        stop = self.stop
        if name == "arrived":
            try:
                stop.arrived_at = parse_when(value, stop.arrived_at)
            except ValueError:
                view = self.stop_view()
                msg = f"Arrival time “{value}” is not readable; type HH:MM (24 h) or YYYY-MM-DD HH:MM."
                view.errors["arrived"] = msg
                view.flags.insert(0, _error_line(msg, "arrived"))
                return view
        elif name == "site":
            stop.site_id = value
        else:
            attr = {"temp": "temp_text", "temp_unit": "temp_unit", "pressure": "pressure_text",
                    "pressure_unit": "pressure_unit", "conductivity": "cond_text",
                    "cond_unit": "cond_unit", "cond_is_sc25": "cond_is_sc25", "do": "do_text",
                    "do_unit": "do_unit", "notes": "notes"}[name]
            setattr(stop, attr, value)
        self.save_later()
        return self.stop_view()

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
        from core.rules.qc import derive_stop

        record, errors = self.bridge.stop_record(stop, self._saved_stop_doc(stop.id))
        if record is None:
            return None, errors
        site = self.site(stop.site_id)
        derived = derive_stop(record, site, self.settings())
        return record.model_copy(update={"derived": derived}), errors

    def stop_view(self, stop: StopForm | None = None) -> StopView:
        from collections import Counter

        from core.rules.qc import stop_flags

        stop = stop or self.stop
        view = StopView()
        if stop is None:
            return view
        record, errors = self.stop_record(stop)
        view.errors = errors
        lines: list[FlagLine] = [_error_line(m, k) for k, m in errors.items()]
        if record is None:
            if not stop.site_id:
                sym, word = severity_mark("note")
                lines.insert(0, FlagLine("input.site", "note", sym, "PICK SITE",
                                         "Pick the site first: its elevation checks the pressure, "
                                         "its water class the criteria.", ""))
            view.flags = lines
            return view
        d = record.derived
        if d is not None:
            view.assessment = d
            view.sat_text = _fmt(d.do_sat_mg_l, 2, "mg/L")
            view.percent_text = _fmt(d.percent_saturation, 1, "%")
            view.do_text = _fmt(d.do_mg_l, 2, "mg/L")
            source = {"given": "as given", "conductivity": "from conductivity",
                      "default": "fresh water"}.get(d.salinity_source, d.salinity_source)
            view.salinity_text = f"{d.salinity:.2f} ({source})"
        labels = Counter(b.label for s in self.trip.stops for b in s.bottles)
        prev = self._previous_record(stop)
        try:
            flags = stop_flags(record, self.settings(), self.now(), site=self.site(stop.site_id),
                               previous=prev, labels_in_trip=labels,
                               other_bottle_labels=self.labels_elsewhere(), trip_id=self.trip.id,
                               sites_known=True)
        except ImportError:  # a part of core this build lacks (e.g. holding times): show the rest
            flags = [f.to_flag() for f in (d.flags if d is not None else [])]
        flags = sorted(flags, key=lambda f: -f.severity.rank)
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
        missing = []
        if not stop.site_id:
            missing.append(FIELD_LABELS["site"])
        if stop.arrived_at is None:
            missing.append(FIELD_LABELS["arrived"])
        if not stop.temp_text.strip():
            missing.append(FIELD_LABELS["temp"])
        if not stop.pressure_text.strip():
            missing.append(FIELD_LABELS["pressure"])
        if not stop.do_text.strip():
            missing.append(FIELD_LABELS["do"])
        if missing:
            return (f"{', '.join(missing)} {'is' if len(missing) == 1 else 'are'} empty; "
                    "fill in every required field before closing the stop.")
        _, errors, _ = self.bridge._quantities(stop)
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
            except Exception:
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
                    return (f"Bottle ID {label} is already used at {where} of this trip; "
                            "each bottle needs its own ID — check the label or scan again.")
        other = {k.casefold(): v for k, v in self.labels_elsewhere().items()}
        if key in other:
            return (f"Bottle ID {label} is already used in another trip on this tablet "
                    f"(trip {other[key][:8]}); each bottle needs its own ID — check the label.")
        now = self.now()
        stop.bottles.append(BottleForm(label=label, kind=kind, collected_at=now,
                                       fixed_at=now if (fixed and kind != "bod") else None))
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
        """Every bottle's holding-time clock in the open trip, most urgent first."""
        try:
            from core.science.holding import holding_clock
        except ImportError:
            return []
        now = now or self.now()
        out: list[ClockLine] = []
        if self.trip is None:
            return out
        overrides = dict(self.settings().holding_overrides_h or {}) or None
        for s in self.trip.stops:
            site = self.site(s.site_id) if s.site_id else None
            where = f"stop {self.stop_number(s)}" + (f" · {self.bridge.site_title(site)}" if site else "")
            for b in s.bottles:
                rule = HOLDING_RULE.get(b.kind)
                if rule is None or b.collected_at is None:
                    continue
                clock = holding_clock(rule, b.collected_at, now, fixed_at=b.fixed_at, overrides=overrides)
                dl = clock.deadline.astimezone()
                deadline = dl.strftime("%H:%M") if dl.date() == now.astimezone().date() else dl.strftime("%a %H:%M")
                if clock.expired:
                    symbol, word = severity_mark("stop-and-check")
                    word = "EXPIRED"
                    text = f"deadline {deadline} passed {fmt_duration(clock.remaining_s)} ago"
                elif clock.flag is not None:
                    symbol, word = severity_mark("warning")
                    word = "SOON"
                    text = f"{fmt_duration(clock.remaining_s)} left · deadline {deadline}"
                else:
                    symbol, word = "○", "OK"
                    text = f"{fmt_duration(clock.remaining_s)} left · deadline {deadline}"
                kind_word = dict(BOTTLE_KINDS)[b.kind]
                if b.kind != "bod" and b.fixed_at is None:
                    text += " · NOT FIXED YET"
                out.append(ClockLine(s.id, b.label, kind_word, where, clock.remaining_s, clock.expired,
                                     text, symbol, word))
        out.sort(key=lambda c: c.remaining_s)
        return out

    # ------------------------------------------------------------------ calibration helper
    def cal_view(self, cal: CalForm, post: bool = False) -> CalView:
        from core.records.models import InputError, measure, parse_number

        view = CalView()
        if not (cal.temp_text.strip() and cal.pressure_text.strip()):
            view.detail = "Type the calibration temperature and station pressure to see the 100 % target."
            return view
        try:
            from core.science import calibration
        except ImportError:
            view.detail = "The calibration helper is not in this build yet."
            return view
        try:
            t = measure("temp", f"{cal.temp_text.strip()} {self.bridge.TEMP_UNIT_TEXT[cal.temp_unit]}",
                        field="temp").value
            p = measure("pressure", f"{cal.pressure_text.strip()} {cal.pressure_unit}", field="pressure").value
            target = float(calibration.calibration_target_mg_l(t, p, method=self.prefs.method))
            view.target_text = _fmt(target, 2, "mg/L")
            if not cal.reading_text.strip():
                view.detail = "Type the meter's reading in water-saturated air."
                return view
            r = parse_number(cal.reading_text, "reading_mg_l")
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
        view.detail = (f"Reading {res.reading_mg_l:.2f} mg/L is {res.difference_mg_l:+.2f} mg/L from the target "
                       f"(tolerance ±{res.tolerance_mg_l:.2f} mg/L).")
        if not res.passed:
            view.detail += (" Readings of this trip may have drifted: note it and tell your QA lead."
                            if post else " Recalibrate the meter per your SOP, then check again.")
        if cal.at is None:
            cal.at = self.now()
        return view

    def attention_lines(self) -> list[str]:
        """What needs attention before or after ending the trip, as lines with symbol and word."""
        out: list[str] = []
        if self.trip is None:
            return out
        for s in self.trip.stops:
            n = self.stop_number(s)
            site = self.site(s.site_id) if s.site_id else None
            where = f"Stop {n}" + (f" ({self.bridge.site_title(site)})" if site else "")
            if not s.closed:
                msg = self.close_problem(s)
                if msg:
                    sym, word = severity_mark("stop-and-check")
                    out.append(f"{sym} {word}: {where}: {msg}")
            for f in self.stop_view(s).flags:
                if f.severity != "note":
                    out.append(f"{f.symbol} {f.word}: {where}: {f.message}"
                               + (f" — {f.action}" if f.action else ""))
        for c in self.clock_lines():
            if c.word != "OK":
                out.append(f"{c.symbol} {c.word}: bottle {c.label} ({c.where}): {c.text}")
        out.extend(self.conflict_lines())
        pre = self.cal_view(self.trip.pre_cal)
        if pre.verdict == "FAIL":
            sym, word = severity_mark("stop-and-check")
            out.append(f"{sym} {word}: pre-trip calibration failed: {pre.detail}")
        elif not pre.verdict and self.trip.stops:
            sym, word = severity_mark("warning")
            out.append(f"{sym} {word}: no pre-trip calibration recorded for this trip.")
        post = self.cal_view(self.trip.post_check, post=True)
        if post.verdict == "FAIL":
            sym, word = severity_mark("stop-and-check")
            out.append(f"{sym} {word}: post-trip check failed: {post.detail}")
        elif not post.verdict:
            sym, word = severity_mark("note")
            out.append(f"{sym} {word}: post-trip calibration check not entered yet.")
        return out

    def conflict_lines(self) -> list[str]:
        """Fields two devices changed differently (found by sync), one readable line each."""
        saved = self._saved.get(self.trip.id) if self.trip else None
        if saved is None:
            return []
        try:
            from core.records.merge import describe_conflict
        except ImportError:
            def describe_conflict(c: dict) -> str:
                return str(c.get("path"))
        sym, _ = severity_mark("warning")
        return [f"{sym} CONFLICT: {describe_conflict(c.model_dump(mode='json'))} — check it and correct the value if needed."
                for c in saved.open_conflicts]

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
            except StaleTrip:
                # changed by another writer (a sync pull, the CLI): put this device's form on the
                # stored copy; stops only the other writer knows are kept (bridge.trip_from_form)
                previous = self.store.load_trip(snapshot.id)
                saved = self.store.save_trip(self.bridge.trip_from_form(snapshot, previous, self), change)
            self._saved[snapshot.id] = saved

        self.worker.submit(snapshot.id, job)
        if wait:
            self.worker.flush()

    def flush(self, timeout: float = 10.0) -> bool:
        if self.dirty:
            self.save_now()
        return self.worker.flush(timeout)
