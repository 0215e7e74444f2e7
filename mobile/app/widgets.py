"""Kivy widgets of our own: numeric entry that explains refusals, a form scroller that keeps the
focused field in view."""

from __future__ import annotations

from kivy.clock import Clock
from kivy.core.window import Window
from kivy.metrics import dp
from kivy.properties import BooleanProperty, NumericProperty, ObjectProperty, StringProperty
from kivy.uix.behaviors import ButtonBehavior
from kivy.uix.boxlayout import BoxLayout
from kivy.uix.label import Label
from kivy.uix.scrollview import ScrollView
from kivy.uix.textinput import TextInput

from mobile.app.numeric import check_insert

__all__ = ["NumericEntry", "TextEntry", "FormScroll", "FlagRow", "WrapLabel", "TapRow", "BottleRow", "ClockRow"]


class TextEntry(TextInput):
    """A single-line text field; Enter commits (fires `on_commit`) as does leaving the field."""

    __events__ = ("on_commit",)

    def __init__(self, **kwargs):
        kwargs.setdefault("multiline", False)
        kwargs.setdefault("write_tab", False)
        super().__init__(**kwargs)
        self.bind(focus=self._focus_changed)

    def _focus_changed(self, _w, focused):
        if not focused:
            self.dispatch("on_commit")

    def on_text_validate(self):
        self.dispatch("on_commit")

    def on_commit(self):
        pass


class NumericEntry(TextEntry):
    """A number field that takes digits and one decimal point or comma (",": many crews type it).

    Unlike `input_filter='float'` it never drops a character: an insertion it cannot take is
    refused whole and `refusal` holds one sentence saying why (the screen shows it under the field).
    """

    refusal = StringProperty("")
    allow_negative = BooleanProperty(False)
    label = StringProperty("This field")

    def insert_text(self, substring, from_undo=False):
        if from_undo:
            return super().insert_text(substring, from_undo=from_undo)
        cursor = self.cursor_index()
        text = self.text
        if self.selection_text:
            a, b = sorted((self.selection_from, self.selection_to))
            text = text[:a] + text[b:]
            cursor = a
        check = check_insert(text, cursor, substring, allow_negative=self.allow_negative, label=self.label)
        if check.refused:
            self.refusal = check.message
            return None
        self.refusal = ""
        if check.accepted:
            return super().insert_text(check.accepted, from_undo=from_undo)
        return None

    def do_backspace(self, from_undo=False, mode="bkspc"):
        self.refusal = ""
        return super().do_backspace(from_undo=from_undo, mode=mode)


class FormScroll(ScrollView):
    """A ScrollView for forms: when a field inside it gets focus it is scrolled into view above the
    soft keyboard. `keyboard_pad` (bind it to the bottom spacer's height) grows by the keyboard's
    height so the last field can scroll clear of it too."""

    keyboard_pad = NumericProperty(0)

    def on_kv_post(self, base_widget):
        Clock.schedule_once(self.watch_fields, 0)
        Window.bind(keyboard_height=self._keyboard_changed)

    def watch_fields(self, *_):
        for w in self.walk(restrict=True):
            if isinstance(w, TextInput) and not getattr(w, "_form_scroll_bound", False):
                w.bind(focus=self._field_focus)
                w._form_scroll_bound = True

    #: Share of the window a soft keyboard takes when the platform does not say (SDL2 on Android
    #: reports keyboard_height 0); common phone and tablet keyboards take 35–45 % in portrait.
    ASSUMED_KEYBOARD_SHARE = 0.42

    def _keyboard_changed(self, _win, height):
        self.keyboard_pad = height

    def _field_focus(self, field, focused):
        from kivy.utils import platform

        if platform == "android" and not Window.keyboard_height:
            self.keyboard_pad = Window.height * self.ASSUMED_KEYBOARD_SHARE if focused else 0
        if focused:
            Clock.schedule_once(lambda _dt: self.bring_into_view(field), 0)

    def bring_into_view(self, field):
        if self.viewport_size[1] <= self.height:
            return
        self.scroll_to(field, padding=dp(24) + self.keyboard_pad, animate=False)


class WrapLabel(Label):
    """A label that wraps to its width and grows to its text's height."""


class FlagRow(BoxLayout):
    """One QC flag: symbol and severity word (never colour alone), the message and the action."""

    symbol = StringProperty("")
    word = StringProperty("")
    message = StringProperty("")
    action = StringProperty("")
    severity = StringProperty("note")


class TapRow(ButtonBehavior, BoxLayout):
    """A list row you tap (a trip, a stop)."""

    title = StringProperty("")
    detail = StringProperty("")
    status = StringProperty("")
    key = StringProperty("")
    target = ObjectProperty(None, allownone=True)


class BottleRow(BoxLayout):
    """One bottle on the stop screen, with buttons to record its fixing time or remove it."""

    __events__ = ("on_fix", "on_remove")
    title = StringProperty("")
    detail = StringProperty("")
    key = StringProperty("")
    can_fix = BooleanProperty(False)

    def on_fix(self):
        pass

    def on_remove(self):
        pass


class ClockRow(ButtonBehavior, BoxLayout):
    """One holding-time clock on the bottles screen; tapping it opens the bottle's stop."""

    stop_id = StringProperty("")
    symbol = StringProperty("")
    word = StringProperty("")
    title = StringProperty("")
    where = StringProperty("")
    detail = StringProperty("")
    expired = BooleanProperty(False)
