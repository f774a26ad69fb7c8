"""Export: pick a folder and write the tests folder (CSV tables + one JSON per test) into it."""

import os

from kivy.properties import StringProperty

from mobile.screens.base import FieldScreen
from mobile.services import export, folders


class ExportScreen(FieldScreen):
    plan = StringProperty("")
    shared = StringProperty("")
    private = StringProperty("")

    def refresh(self):
        self.plan = export.plan_text(self.service, self.ids.drafts.state == "down")
        self.private, self.shared = self.app.default_export_folder(), folders.shared_documents()
        os.makedirs(self.private, exist_ok=True)
        if not self.ids.browser.path or self.ids.browser.path == os.path.expanduser("~"):
            self.ids.browser.path = self.shared if os.path.isdir(self.shared) else self.private

    def open_folder(self, path):
        self.ids.browser.path = path if os.path.isdir(path) else self.private

    def export(self, folder):
        self.show(self.app.export_to(folder, self.ids.drafts.state == "down"))
