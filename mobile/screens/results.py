"""Results: the big figures, the hydrant curve (N^1.85 scale), findings, cautions, finish, correct."""

from kivy.clock import mainthread
from kivy.properties import BooleanProperty, DictProperty, StringProperty

from mobile.screens.base import FieldScreen
from mobile.services import checklist, views
from mobile.widgets.common import confirm


class ResultsScreen(FieldScreen):
    result = DictProperty(views.EMPTY_RESULTS)
    curve = StringProperty("")
    history = StringProperty("")
    status = StringProperty("")
    caution = StringProperty(checklist.DESIGN_CAUTION)
    drawing = BooleanProperty(False)  # the curve is being drawn in a worker
    finished = BooleanProperty(False)

    _curve_for = ""
    asking = None  # the open confirmation, if any

    @property
    def busy(self) -> bool:
        return self.drawing

    def refresh(self):
        if not self.tid:
            return
        self.result = views.results_view(self.service, self.tid)
        if self._curve_for != self.tid:  # another test: its curve and its reason box are not ours
            self.curve, self._curve_for, self.ids.reason.text = "", self.tid, ""
        self.drawing = True
        self.app.curve_png(self.tid, self.show_curve)
        self.status = self.app.test_status(self.tid)
        self.finished = self.service.store.test(self.tid).status == "finished"
        self.history = views.history_text(self.service, self.tid)

    @mainthread
    def show_curve(self, tid, path):
        if tid == self.tid:
            self.curve, self.drawing = path, False

    def finish(self):
        self.show(self.service.finish(self.tid))

    def correct(self, reason):
        self.asking = confirm(self.service.correction_question(self.tid, reason), "YES, REOPEN",
                              lambda: self.reopen(reason), self.show)

    def reopen(self, reason):
        self.ids.reason.text = "" if self.show(self.service.correct(self.tid, reason)) else reason
