"""The sync screen: the hub address, sending the trips, and what came of each."""

from __future__ import annotations

from kivy.clock import mainthread
from kivy.factory import Factory
from kivy.properties import BooleanProperty, NumericProperty, ObjectProperty, StringProperty

from mobile.app.screens.base import BaseScreen, ctl

__all__ = ["SyncScreen"]

IDLE_LINE = "Trips stay on this tablet until they reach the hub; logging goes on while it sends."


class SyncScreen(BaseScreen):
    target_entry = ObjectProperty(None)
    rows_box = ObjectProperty(None)
    progress = NumericProperty(0)
    progress_max = NumericProperty(1)
    running = BooleanProperty(False)
    status = StringProperty("")
    _result_line = ""  # what the last send did, kept with its rows until the next one

    def on_pre_enter(self, *_):
        if not self.target_entry.text:
            self.target_entry.text = ctl().prefs.sync_target
        if self.running:
            return
        if self._result_line:  # the last send's rows stay; the summary says where things stand now
            self.status = f"{self._result_line}\n{ctl().sync_overview().summary}"
        else:
            self.show_overview()

    def show_overview(self, first_line=IDLE_LINE):
        """Where each trip on this tablet stands with the hub: the summary under the button, a row per trip."""
        ov = ctl().sync_overview()
        self.status = f"{first_line}\n{ov.summary}" if first_line else ov.summary
        self.rows_box.clear_widgets()
        for line in ov.lines:
            self.rows_box.add_widget(Factory.WrapLabel(text=line))

    def send(self):
        if self.running:
            return
        target = self.target_entry.text.strip()
        refusal = ctl().send(target, progress=self._progress, on_done=self._done)
        if refusal:
            self.status = refusal
            return
        self.running = True
        self.progress = 0
        self.rows_box.clear_widgets()
        self.status = f"Sending to {ctl().shown_address(target)} …"

    @mainthread
    def _progress(self, done, total, trip_id, result):
        self.progress_max = max(total, 1)
        self.progress = done
        self.status = f"Sending… {done} of {total} trips"
        self.rows_box.add_widget(Factory.WrapLabel(text=ctl().send_progress_line(trip_id, result)))

    @mainthread
    def _done(self, report, error):
        self.running = False
        ctl().refresh_from_store()  # a merge during the send changed the open trip: show it
        if error is not None:
            self._result_line = f"■ Not sent — will retry: {error}"
            self.show_overview(self._result_line)
            return
        self.progress = self.progress_max
        self.rows_box.clear_widgets()
        now = ctl().sync_overview()  # one read of the outbox and the trip list serves both the rows and the summary
        done = ctl().send_result(report, now.titles)
        for line in done.lines:
            self.rows_box.add_widget(Factory.WrapLabel(text=line))
        self._result_line = done.summary
        self.status = f"{self._result_line}\n{now.summary}"
