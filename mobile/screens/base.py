"""What every screen shares: the app and its service, a message line, and refresh on entry."""

from kivy.app import App
from kivy.properties import BooleanProperty, StringProperty
from kivy.uix.screenmanager import Screen
from kivy.uix.scrollview import ScrollView


class FieldScreen(Screen):
    message = StringProperty("")
    bad = BooleanProperty(False)

    @property
    def app(self):
        return App.get_running_app()

    @property
    def service(self):
        return self.app.service

    @property
    def tid(self) -> str:
        return self.app.test_id

    @property
    def busy(self) -> bool:
        """True while a worker is still computing what the screen shows (override)."""
        return False

    def on_pre_enter(self, *args):
        self.message = ""
        self.refresh()
        self.to_top()

    def to_top(self):
        """Every list and scrolled column starts at its top: the headline and the buttons where
        the crew last saw them, never an old scroll position."""
        for w in self.walk(restrict=True):
            if isinstance(w, ScrollView):
                w.scroll_y = 1

    def refresh(self):
        """Pull what the screen shows from the service (override)."""

    def show(self, outcome) -> bool:
        """Show an ``Outcome``'s message (red when refused, with any warnings); returns ``ok``."""
        extra = ("\n" + "\n".join(outcome.warnings)) if outcome.warnings else ""
        self.message, self.bad = outcome.message + extra, not outcome.ok or bool(outcome.warnings)
        self.refresh()
        return outcome.ok
