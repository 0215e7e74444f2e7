"""Runs the real touch app in this interpreter and drives it like a person (taps, keystrokes); writes JSON.

    python -m tests.app.driver SCENARIO DATA_DIR RESULT.json [--artifacts DIR] [--size WxH]

One app per interpreter (Kivy keeps one window per process), so each test starts this in a child.
Scenarios live in tests/app/scenarios.py; each is a generator that yields seconds to wait.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
import traceback
from pathlib import Path


class Person:
    """What a technician does to the screen: tap, type, press Enter; plus what the test notes down."""

    def __init__(self, app, artifacts: Path | None, result_path: Path):
        self.app = app
        self.artifacts = artifacts
        self.result_path = result_path
        self.results: dict = {"shots": []}

    # --- looking
    def screen(self, name: str | None = None):
        return self.app.screen(name) if name else self.app.root.current_screen

    def ids(self, name: str | None = None):
        return self.screen(name).ids

    def note(self, key: str, value) -> None:
        self.results[key] = value
        self.flush_results()

    def flush_results(self) -> None:
        tmp = self.result_path.with_suffix(".tmp")
        tmp.write_text(json.dumps(self.results, default=str, indent=1))
        os.replace(tmp, self.result_path)

    def shot(self, name: str):
        if self.artifacts is None:
            return
        path = self.app.save_snapshot(self.artifacts / f"{name}.png")
        self.results["shots"].append(str(path))
        yield 0

    # --- touching
    def _scroll_to(self, widget):
        from kivy.uix.scrollview import ScrollView

        p = widget.parent
        seen = 0
        while p is not None and not isinstance(p, ScrollView) and seen < 100:
            p = p.parent if p.parent is not p else None
            seen += 1
        if not isinstance(p, ScrollView):
            return
        if p is not None and p.viewport_size[1] > p.height:
            p.scroll_to(widget, padding=40, animate=False)

    def tap(self, widget):
        from kivy.tests.common import UnitTestTouch

        self._scroll_to(widget)
        yield 0.05
        x, y = widget.to_window(*widget.center)
        touch = UnitTestTouch(x, y)
        touch.touch_down()
        yield 0.02
        touch.touch_up()
        yield 0.05

    def type(self, entry, text: str, clear: bool = True):
        """Taps the field, then types `text` one key at a time through the window's keyboard."""
        from kivy.core.window import Window

        yield from self.tap(entry)
        if not entry.focus:
            entry.focus = True
            yield 0.02
        if clear:
            entry.select_all()
            entry.delete_selection()
        for ch in text:
            Window.dispatch("on_textinput", ch)
        yield 0.02

    def enter(self):
        from kivy.core.window import Window

        Window.dispatch("on_key_down", 13, 36, "\r", [])
        Window.dispatch("on_key_up", 13, 36)
        yield 0.05

    def pick(self, spinner, value: str):
        """Opens a drop-down and taps the option `value`."""
        yield from self.tap(spinner)
        yield 0.1
        dd = spinner._dropdown
        option = next((c for c in dd.container.children if getattr(c, "text", None) == value), None)
        if option is None:
            raise AssertionError(f"{value!r} is not among {[c.text for c in dd.container.children]}")
        yield from self.tap(option)
        yield 0.1


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("scenario")
    ap.add_argument("data_dir")
    ap.add_argument("result")
    ap.add_argument("--artifacts")
    ap.add_argument("--size", default="1200x780")
    ap.add_argument("--screen", default=None)
    ap.add_argument("--param", action="append", default=[])
    a = ap.parse_args(argv)
    t0 = time.perf_counter()
    from tests.app import scenarios

    fn = getattr(scenarios, a.scenario)
    params = dict(p.split("=", 1) for p in a.param)
    result_path = Path(a.result)
    artifacts = Path(a.artifacts) if a.artifacts else None
    if artifacts:
        artifacts.mkdir(parents=True, exist_ok=True)
    w, h = (int(v) for v in a.size.split("x"))

    def hook(app):
        from kivy.clock import Clock

        person = Person(app, artifacts, result_path)
        person.results["first_drawn_s"] = app.first_drawn_s
        person.results["since_launch_s"] = time.perf_counter() - t0
        gen = fn(person, **params)

        def step(_dt):
            try:
                delay = next(gen)
            except StopIteration:
                person.results["ok"] = True
                person.flush_results()
                app.stop()
                return
            except Exception:  # noqa: BLE001 - reported to the parent test
                person.results["ok"] = False
                person.results["error"] = traceback.format_exc()
                person.flush_results()
                app.stop()
                return
            Clock.schedule_once(step, float(delay or 0))

        Clock.schedule_once(step, 0)

    from mobile.app.app import run_app

    try:
        return run_app(Path(a.data_dir), start_screen=a.screen, size=(w, h), hook=hook)
    except BaseException:
        result_path.write_text(json.dumps({"ok": False, "error": traceback.format_exc()}))
        raise


if __name__ == "__main__":
    sys.exit(main())
