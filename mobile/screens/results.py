"""Results: the big figures, the hydrant curve (N^1.85 scale), findings, cautions, finish, correct."""

from kivy.properties import DictProperty, StringProperty

from mobile.screens.base import FieldScreen
from mobile.services import checklist, views


class ResultsScreen(FieldScreen):
    result = DictProperty(views.EMPTY_RESULTS)
    curve = StringProperty("")
    history = StringProperty("")
    status = StringProperty("")
    caution = StringProperty(checklist.DESIGN_CAUTION)

    def refresh(self):
        if not self.tid:
            return
        self.result = views.results_view(self.service, self.tid)
        self.curve = self.app.curve_png(self.tid)
        self.status = self.app.test_status(self.tid)
        self.history = views.history_text(self.service, self.tid)

    def finish(self):
        self.show(self.service.finish(self.tid))

    def correct(self, reason):
        self.show(self.service.correct(self.tid, reason))
