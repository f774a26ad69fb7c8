"""A touch-sized folder picker: tap a folder to open it, UP to go back, USE to choose."""

import os

from kivy.properties import BooleanProperty, ListProperty, StringProperty
from kivy.uix.boxlayout import BoxLayout

from mobile.services import folders


class FolderBrowser(BoxLayout):
    path = StringProperty(os.path.expanduser("~"))
    entries = ListProperty([])
    suffixes = ListProperty([])
    action = StringProperty("USE THIS FOLDER")
    note = StringProperty("")  # why a new folder could not be made
    can_make = BooleanProperty(False)  # offer NEW FOLDER (the export picker does)

    __events__ = ("on_choose",)

    def on_path(self, *args):
        self.entries = folders.listing(self.path, tuple(self.suffixes))

    def on_kv_post(self, base_widget):
        self.on_path()

    def open(self, path, is_dir=True):
        if is_dir:
            self.path = path
        else:
            self.dispatch("on_choose", path)

    def make(self, name):
        """NEW FOLDER: create ``name`` here and open it."""
        ok, said = folders.make_folder(self.path, name)
        self.note, self.path = ("", said) if ok else (said, self.path)

    def up(self):
        self.path = folders.parent(self.path)

    def on_choose(self, path):
        pass
