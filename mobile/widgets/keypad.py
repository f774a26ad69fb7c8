"""A large on-screen numeric keypad: digits, decimal point, minus, delete, clear and Enter.

Used for every reading so that a crew in gloves never needs the device keyboard. The keypad only
edits its ``text``; pressing Enter dispatches ``on_enter(text)`` and the screen hands the text to the
service, which checks and stores it.
"""

from kivy.properties import StringProperty
from kivy.uix.boxlayout import BoxLayout

MAX_CHARS = 12


class Keypad(BoxLayout):
    text = StringProperty("")
    unit = StringProperty("")
    prompt = StringProperty("")

    __events__ = ("on_enter",)

    def press(self, key: str) -> None:
        """Apply one key: a digit or '.' appends, '-' toggles the sign, 'del' and 'clear' erase."""
        if key == "del":
            self.text = self.text[:-1]
        elif key == "clear":
            self.text = ""
        elif key == "-":
            self.text = self.text[1:] if self.text.startswith("-") else "-" + self.text
        elif key == "." and "." in self.text:
            return
        elif len(self.text) < MAX_CHARS:
            self.text += key

    def enter(self) -> None:
        self.dispatch("on_enter", self.text)

    def on_enter(self, text):
        pass
