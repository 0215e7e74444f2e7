"""What every screen shares: the running app's controller, moving between screens, the debounced save."""

from __future__ import annotations

from kivy.app import App
from kivy.properties import StringProperty
from kivy.uix.screenmanager import Screen
from kivy.uix.textinput import TextInput

__all__ = ["BaseScreen", "ctl", "go"]


def ctl():
    return App.get_running_app().ctl


def go(name: str) -> None:
    App.get_running_app().go(name)


class BaseScreen(Screen):
    message = StringProperty("")

    def on_leave(self, *_):
        # no field stays focused (and no soft keyboard stays up) on a screen no one sees
        for w in self.walk(restrict=True):
            if isinstance(w, TextInput) and w.focus:
                w.focus = False

    def commit(self):
        App.get_running_app().save_trigger()
