"""A large on-screen numeric keypad: digits, decimal point, minus, delete, clear and Enter.

Used for every reading so that a crew in gloves never needs the device keyboard. The keypad only
edits its ``text``; pressing Enter dispatches ``on_enter(text)`` and the screen hands the text to the
service, which checks and stores it.
"""

from kivy.properties import ListProperty, StringProperty
from kivy.uix.boxlayout import BoxLayout

MAX_CHARS = 12


class Keypad(BoxLayout):
    text = StringProperty("")
    unit = StringProperty("")  # the unit the number is typed in; tap it to change
    units = ListProperty([])  # the units the unit key cycles through (first: the display unit)
    prompt = StringProperty("")

    __events__ = ("on_enter",)

    def press(self, key: str) -> None:
        """Apply one key: a digit or '.' appends, '-' toggles the sign, 'del' and 'clear' erase,
        'unit' changes the unit."""
        if key == "unit":
            self.next_unit()
        elif key == "del":
            self.text = self.text[:-1]
        elif key == "clear":
            self.text = ""
        elif key == "-":
            self.text = self.text[1:] if self.text.startswith("-") else "-" + self.text
        elif key == "." and "." in self.text:
            return
        elif len(self.text) < MAX_CHARS:
            self.text += key

    def next_unit(self) -> None:
        """The unit key: the next unit of ``units`` (the typed number keeps its digits)."""
        if self.units:
            at = self.units.index(self.unit) if self.unit in self.units else -1
            self.unit = self.units[(at + 1) % len(self.units)]

    def typed(self) -> str:
        """What was typed, with the unit shown on the keypad (so a chosen unit is honoured)."""
        return f"{self.text} {self.unit}" if self.text and self.unit else self.text

    def enter(self) -> None:
        self.dispatch("on_enter", self.typed())

    def on_enter(self, text):
        pass
