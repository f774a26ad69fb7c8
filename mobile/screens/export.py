"""Export: pick a folder and write the tests folder (CSV tables + one JSON per test) into it."""

import os

from kivy.properties import StringProperty

from mobile.screens.base import FieldScreen
from mobile.services import export


class ExportScreen(FieldScreen):
    plan = StringProperty("")

    def refresh(self):
        self.plan = export.plan_text(self.service, self.ids.drafts.state == "down")
        start = self.app.default_export_folder()
        os.makedirs(start, exist_ok=True)
        if not self.ids.browser.path or self.ids.browser.path == os.path.expanduser("~"):
            self.ids.browser.path = start

    def export(self, folder):
        self.show(self.app.export_to(folder, self.ids.drafts.state == "down"))
