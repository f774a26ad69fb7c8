"""Before flowing: the safety and preparation checklist; ticks are saved with the test."""

from kivy.properties import ListProperty, StringProperty

from mobile.screens.base import FieldScreen
from mobile.services import checklist, views


class ChecklistScreen(FieldScreen):
    rows = ListProperty([])
    local_rules = StringProperty(checklist.LOCAL_RULES)

    def refresh(self):
        self.rows = views.checklist_rows(self.service, self.tid) if self.tid else []

    def tick(self, key, ticked):
        self.show(self.service.tick(self.tid, key, ticked))

    def all_done(self):
        if self.show(self.service.tick_all(self.tid)):
            self.app.go(self.app.setup_screen())
