"""The composition root of the touch app: opens the store, builds the controller, loads the screens."""

from __future__ import annotations

import os
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any, ClassVar

HERE = Path(__file__).resolve().parent
FONT_NAME = "StreamSans"
_T0 = time.perf_counter()


def configure_kivy(size: tuple[int, int] | None = None) -> None:
    """Kivy settings that must be made before kivy.core.window is imported."""
    os.environ.setdefault("KIVY_NO_ARGS", "1")
    os.environ.setdefault("KIVY_NO_CONSOLELOG", "1")
    os.environ.setdefault("KIVY_NO_FILELOG", "1")
    if sys.platform.startswith("linux"):
        os.environ.setdefault("KIVY_CLIPBOARD", "sdl2")  # no probing for xclip/xsel
    from kivy.config import Config

    Config.set("kivy", "exit_on_escape", "0")
    Config.set("input", "mouse", "mouse,disable_multitouch")
    if size:
        Config.set("graphics", "width", str(size[0]))
        Config.set("graphics", "height", str(size[1]))
    Config.set("graphics", "resizable", "1")


def _register_fonts() -> None:
    import kivy
    from kivy.core.text import LabelBase

    regular = Path(kivy.__file__).parent / "data" / "fonts" / "DejaVuSans.ttf"
    bold = Path("/usr/share/fonts/truetype/dejavu/DejaVuSans-Bold.ttf")
    LabelBase.register(FONT_NAME, fn_regular=str(regular), fn_bold=str(bold if bold.exists() else regular))


def build_app(
    data_dir: Path,
    *,
    start_screen: str | None = None,
    snapshot: Path | None = None,
    hook: Callable[[Any], None] | None = None,
):
    """Returns the App instance (not yet running). `hook(app)` runs once the first screen is drawn."""
    from kivy.app import App
    from kivy.clock import Clock
    from kivy.core.window import Window
    from kivy.lang import Builder

    from mobile.app import screens, widgets  # noqa: F401 - widgets registers its classes with the Factory
    from mobile.app.controller import AppController
    from mobile.app.theme import PALETTE, SIZES, rgba

    _register_fonts()
    screens.register()

    class StreamtabApp(App):
        title = "streamtab"

        def __init__(self, **kwargs):
            super().__init__(**kwargs)
            from core.store import DeviceStore

            self.store = DeviceStore.open(data_dir)
            self.ctl = AppController(self.store)
            self.palette = {k: rgba(v) for k, v in PALETTE.items()}
            self.sizes = SIZES
            self.font_name = FONT_NAME
            from core.science.conductivity import CONDUCTIVITY_UNITS
            from core.science.pressure import PRESSURE_UNITS

            self.pressure_units = list(PRESSURE_UNITS)  # the unit pickers of every screen
            # "uS/cm" is only the typed spelling of µS/cm: the pickers offer µS/cm once
            self.cond_units = [u for u in CONDUCTIVITY_UNITS if u != "uS/cm"]
            self.first_drawn_s: float | None = None
            self.first_drawn_epoch: float | None = None
            self.save_trigger = Clock.create_trigger(self._save, 0.4)
            from mobile.app.lab_bench import LabBench

            # lab mode: bench writes wait for the field form's queued saves and reload an open trip
            self.bench = LabBench(self.store, before_write=self.ctl.worker.flush, after_write=self._reload_if_open)

        def _reload_if_open(self, trip_id: str) -> None:
            if self.ctl.trip is not None and self.ctl.trip.id == trip_id:
                stop_id = self.ctl.stop_id
                self.ctl.open_trip(trip_id)
                self.ctl.stop_id = stop_id

        def load_kv(self, filename=None):
            Builder.load_file(str(HERE / "theme.kv"))
            for name in screens.KV_MODULES:
                Builder.load_file(str(HERE / "screens" / f"{name}.kv"))
            return super().load_kv(filename)  # the root: streamtab.kv beside this file

        def build(self):
            Window.clearcolor = self.palette["paper"]
            Window.bind(on_keyboard=self._back_key)
            return self.root

        BACK: ClassVar[dict[str, str]] = {
            "stop": "trips",
            "bottles": "stop",
            "end": "stop",
            "start": "trips",
            "sync": "trips",
            "settings": "trips",
            "bench": "trips",
            "sign": "bench",
        }

        def _back_key(self, _window, key, *_args):
            """Android's back button (Escape on a desktop) goes one screen back, never out of the app."""
            if key != 27:
                return False
            target = self.BACK.get(self.root.current)
            if target == "stop" and self.ctl.stop is None:
                target = "trips"
            if target:
                self.go(target)
            return True

        def screen(self, name: str):
            """The screen called `name`, built from its kv rule the first time it is asked for."""
            from kivy.factory import Factory

            if not self.root.has_screen(name):
                self.root.add_widget(getattr(Factory, screens.SCREENS[name])(name=name))
            return self.root.get_screen(name)

        def go(self, name: str) -> None:
            self.screen(name)
            self.root.current = name

        def _save(self, *_):
            self.ctl.save_now()

        def _check_saves(self, _dt):
            """A save the store refused or could not make (locked, disk full) is said on screen and retried."""
            if self.ctl.adopt_rebased():
                # a save met another writer's change (a sync merge): show the merged values
                screen = self.root.current_screen
                if self.root.current == "stop" and self.ctl.stop is not None:
                    screen.load()
            errors = self.ctl.take_save_errors()
            if errors:
                screen = self.root.current_screen
                if hasattr(screen, "message"):
                    screen.message = f"■ Not saved yet — {errors[-1]} It will be tried again."
                self.save_trigger()

        def on_start(self):
            Clock.schedule_interval(self._check_saves, 1.0)
            screen, _ = (start_screen, None) if start_screen else self.ctl.resume_point()
            if start_screen and start_screen in ("stop", "bottles", "end"):
                self._ensure_trip_for(start_screen)
            self.go(screen or "trips")
            Clock.schedule_once(self._drawn, 0)

        def _ensure_trip_for(self, screen: str) -> None:
            c = self.ctl
            if c.trip is None:
                c.resume_point()
            if c.trip is None:
                tid = next((t.id for t in c.store.list_trips()), None)
                if tid:
                    c.open_trip(tid)
            if c.trip is not None and c.stop is None and c.trip.stops:
                c.stop_id = c.trip.stops[-1].id

        def _drawn(self, _dt):
            # one more frame so the first screen is really on the glass
            def mark(_dt2):
                self.first_drawn_s = time.perf_counter() - _T0
                self.first_drawn_epoch = time.time()
                if snapshot is not None:
                    Clock.schedule_once(lambda _d: self.save_snapshot(snapshot, stop=True), 0.3)
                if hook is not None:
                    hook(self)

            Clock.schedule_once(mark, 0)

        def save_snapshot(self, path: Path, stop: bool = False) -> Path:
            from core.store.atomic import write_export

            path = Path(path).resolve()
            path.parent.mkdir(parents=True, exist_ok=True)
            tmp = Path(Window.screenshot(name=str(path.with_name(path.stem + "-tmp.png"))))
            try:  # written for people like every export: atomic, with the umask's permissions
                write_export(path, tmp.read_bytes())
            finally:
                tmp.unlink(missing_ok=True)
            if stop:
                self.stop()
            return path

        def on_pause(self):
            # Android may kill a paused app without on_stop: everything typed goes to disk now
            self.ctl.flush(5)
            return True

        def on_resume(self):
            # no field left focused without a keyboard after coming back
            for w in self.root.walk():
                if hasattr(w, "focus") and getattr(w, "focus", False):
                    w.focus = False

        def on_stop(self):
            self.ctl.flush(10)

    return StreamtabApp()


def run_app(
    data_dir: Path,
    *,
    start_screen: str | None = None,
    snapshot: Path | None = None,
    size: tuple[int, int] | None = None,
    hook: Callable[[Any], None] | None = None,
) -> int:
    configure_kivy(size)
    app = build_app(Path(data_dir), start_screen=start_screen, snapshot=snapshot, hook=hook)
    app.run()
    app.ctl.flush(10)
    if snapshot is not None and not Path(snapshot).exists():
        sys.stderr.write(f"streamtab: the snapshot {snapshot} was not written\n")
        return 1
    return 0
