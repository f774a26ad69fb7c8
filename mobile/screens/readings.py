"""Readings: pick a reading, type it on the keypad, SAVE; each value is checked and stored at once."""

from kivy.clock import Clock
from kivy.properties import BooleanProperty, DictProperty, ListProperty, StringProperty

from mobile.screens.base import FieldScreen
from mobile.services import timing, views


class ReadingsScreen(FieldScreen):
    rows = ListProperty([])
    slot = StringProperty("")
    prompt = StringProperty("")
    result = DictProperty(views.EMPTY_RESULTS)
    timer = StringProperty("")
    flowing = BooleanProperty(False)

    _advance = False  # after a saved reading: the next refresh moves to the first empty one

    def refresh(self):
        if not self.tid:
            return
        rows = views.reading_rows(self.service, self.tid, self.slot)
        self.slot, self._advance = views.pick_slot(rows, self.slot, self._advance), False
        self.rows = [dict(r, selected=r["slot"] == self.slot) for r in rows]
        row = next((r for r in self.rows if r["slot"] == self.slot), None)
        self.prompt = row["label"] if row else "Set up gauge and flow hydrants first"
        self.ids.keypad.units = views.keypad_units(row["kind"], self.service.system) if row else []
        if self.ids.keypad.unit not in self.ids.keypad.units:  # a unit the crew chose stays
            self.ids.keypad.unit = row["unit"] if row else ""
        self.result = views.results_view(self.service, self.tid)
        self.tick_timer()

    def tick_timer(self, *args):
        header = self.service.header(self.tid) if self.tid else {}
        self.timer, self.flowing = timing.timer_text(header), timing.running(header)

    def on_pre_enter(self, *args):
        self.ids.keypad.text, self.ids.keypad.unit = "", ""  # nothing typed elsewhere carries over
        super().on_pre_enter(*args)
        self._clock = Clock.schedule_interval(self.tick_timer, 1.0)

    def on_leave(self, *args):
        self._clock.cancel()

    def toggle_flow(self):
        self.show(self.service.stop_flow(self.tid) if self.flowing else self.service.start_flow(self.tid))

    def select(self, slot):
        self.slot, self.message = slot, ""  # a message about another reading is stale now
        self.ids.keypad.text, self.ids.keypad.unit = "", ""
        self.refresh()

    def enter(self, text):
        outcome = self.service.enter(self.tid, self.slot, text)
        if outcome.ok:  # go on to the next empty reading (in the one refresh that show makes)
            self.ids.keypad.text, self._advance = "", True
        self.show(outcome)

    def finish(self):
        if self.show(self.service.finish(self.tid)):
            self.app.go("results")
