"""On-site model check: predicted against observed pressure, with what to do about a suspect reading.

The solve runs in a worker thread (``mobile.services.check.run_in_background``); its result comes
back through ``kivy.clock.mainthread``, so the screen never freezes. A progress bar moves meanwhile.
"""

from functools import partial

from kivy.animation import Animation
from kivy.clock import mainthread
from kivy.properties import BooleanProperty, ListProperty, StringProperty

from mobile.screens.base import FieldScreen
from mobile.services import check, verdicts, views


class CheckScreen(FieldScreen):
    running = BooleanProperty(False)
    rows = ListProperty([])
    summary = StringProperty("Tap RUN CHECK to simulate this test on the area's network.")

    _shown_for = ""

    @property
    def busy(self) -> bool:
        return self.running

    def refresh(self):
        if self.tid != self._shown_for and not self.running:  # another test: clear the old answer
            self._shown_for, self.rows, self.bad = self.tid, [], False
            self.summary = views.check_summary(self.service, self.tid)

    def run(self):
        if self.running:
            return
        self.running, self.rows = True, []
        self.summary = "Simulating the test on the network..."
        self._spin()
        check.run_in_background(self.service, self.tid,
                                partial(self.done, self.tid, verdicts.stamp(self.service, self.tid)))

    def _spin(self):
        bar = self.ids.progress
        bar.value = 0
        self._anim = Animation(value=100, duration=1.0) + Animation(value=0, duration=0)
        self._anim.repeat = True
        self._anim.start(bar)

    @mainthread
    def done(self, tid, at, result):
        if getattr(self, "_anim", None):
            self._anim.cancel(self.ids.progress)
        self.ids.progress.value = 100 if result.ok else 0
        self.running = False
        self.summary, self.bad = result.message, not result.ok or any(g.suspect for g in result.gauges)
        self.rows = views.check_rows(result, self.service.system)
        saved = verdicts.save(self.service, tid, result, at)  # kept with the revision it judged
        self.message = "" if saved.ok or not result.ok else saved.message
