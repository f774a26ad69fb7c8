"""Readings: pick a reading, type it on the keypad, SAVE; each value is checked and stored at once."""

from kivy.properties import DictProperty, ListProperty, StringProperty

from mobile.screens.base import FieldScreen
from mobile.services import views


class ReadingsScreen(FieldScreen):
    rows = ListProperty([])
    slot = StringProperty("")
    prompt = StringProperty("")
    result = DictProperty(views.EMPTY_RESULTS)

    def refresh(self):
        if not self.tid:
            return
        rows = views.reading_rows(self.service, self.tid, self.slot)
        self.slot = views.pick_slot(rows, self.slot)
        self.rows = [dict(r, selected=r["slot"] == self.slot) for r in rows]
        row = next((r for r in self.rows if r["slot"] == self.slot), None)
        self.prompt = row["label"] if row else "Set up gauge and flow hydrants first"
        self.ids.keypad.unit = row["unit"] if row else ""
        self.result = views.results_view(self.service, self.tid)

    def select(self, slot):
        self.slot = slot
        self.ids.keypad.text = ""
        self.refresh()

    def enter(self, text):
        if self.show(self.service.enter(self.tid, self.slot, text)):
            self.ids.keypad.text = ""
            self.select(next((r["slot"] for r in self.rows if r["value"] == "-"), self.slot))
