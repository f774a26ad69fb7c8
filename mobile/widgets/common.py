"""Big buttons, labels and fields used on every screen (their look is in ``common.kv``)."""

from kivy.properties import BooleanProperty, ColorProperty, StringProperty
from kivy.uix.behaviors import ButtonBehavior
from kivy.uix.boxlayout import BoxLayout
from kivy.uix.button import Button
from kivy.uix.label import Label
from kivy.uix.popup import Popup
from kivy.uix.scrollview import ScrollView
from kivy.uix.textinput import TextInput
from kivy.uix.togglebutton import ToggleButton

from mobile import kivy_log

kivy_log.install()  # a Field (TextInput) loads the X cut buffer on Linux; the app does not use it


class BigButton(Button):
    """A 64 dp high button with a solid fill; ``tone`` picks navy, green or red."""

    tone = StringProperty("navy")


class BigToggle(ToggleButton):
    pass


class Heading(Label):
    pass


class Body(Label):
    pass


class Figure(Label):
    """A large figure (a flow or a pressure) with a small caption above it."""

    caption = StringProperty("")


class Message(ScrollView):
    """The message under an entry, red when ``bad``. Its height is fixed (three lines, a longer
    message scrolls), so that a message never moves the buttons a gloved finger is aiming at."""

    text = StringProperty("")
    bad = BooleanProperty(False)


class Field(TextInput):
    pass


class ListRow(ButtonBehavior, BoxLayout):
    """A tappable row of a list (a test, a hydrant, a reading)."""

    text = StringProperty("")
    detail = StringProperty("")
    side = StringProperty("")
    key = StringProperty("")
    selected = BooleanProperty(False)
    fill = ColorProperty([1, 1, 1, 1])


class Bar(BoxLayout):
    """The top bar of a screen: title on the left, navigation buttons on the right."""

    title = StringProperty("")


class Confirm(Popup):
    """Asks before an action that cannot be taken back in one tap (reopening a finished test)."""

    question = StringProperty("")
    yes_text = StringProperty("YES")

    __events__ = ("on_yes",)

    def on_yes(self):
        pass


def confirm(outcome, yes_text: str, on_yes, on_refused) -> Confirm | None:
    """Open a ``Confirm`` with ``outcome``'s question when it is ok, else hand it to ``on_refused``."""
    if not outcome.ok:
        on_refused(outcome)
        return None
    box = Confirm(question=outcome.message, yes_text=yes_text)
    box.bind(on_yes=lambda *_: on_yes())
    box.open()
    return box
