"""Big buttons, labels and fields used on every screen (their look is in ``common.kv``)."""

from kivy.properties import BooleanProperty, ColorProperty, StringProperty
from kivy.uix.behaviors import ButtonBehavior
from kivy.uix.boxlayout import BoxLayout
from kivy.uix.button import Button
from kivy.uix.label import Label
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


class Message(Label):
    """The plain message line under an entry; red when ``bad``."""

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
