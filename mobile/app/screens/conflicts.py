"""The conflicts panel of the stop and end screens: each open conflict in words, its values as large buttons."""

from __future__ import annotations

from kivy.factory import Factory
from kivy.properties import NumericProperty, ObjectProperty, StringProperty
from kivy.uix.boxlayout import BoxLayout

from mobile.app.screens.base import ctl

__all__ = ["ConflictPanel"]


class ConflictPanel(BoxLayout):
    """Shows the open trip's conflicts; tapping a value settles that conflict by keeping it."""

    count = NumericProperty(0)
    message = StringProperty("")
    rows_box = ObjectProperty(None)

    def refresh(self, *_):
        views = ctl().conflicts()
        self.count = len(views)
        self.rows_box.clear_widgets()
        for view in views:
            self.rows_box.add_widget(Factory.WrapLabel(text=f"▲ {view.message}"))
            for value in view.values:
                when = f" · {value['at']}" if value.get("at") else ""
                button = Factory.ConflictValueButton(text=f"Keep {value['text']}\n(from {value['device']}{when})")
                # the rule's own properties exist once the rule is applied, after construction
                button.conflict_id, button.keep = view.id, int(value["n"])
                button.bind(on_release=self.keep)
                self.rows_box.add_widget(button)

    def keep(self, button):
        refusal = ctl().settle_conflict(button.conflict_id, button.keep)
        self.message = f"■ {refusal}" if refusal else "✓ Conflict settled; the value kept is saved."
        self.refresh()
        self.dispatch("on_settled")

    __events__ = ("on_settled",)

    def on_settled(self):
        pass
