"""Settings: US or SI units, the target residual for the rated flow; where the data are kept."""

from kivy.properties import StringProperty

from mobile.screens.base import FieldScreen
from mobile.services import values, views


class SettingsScreen(FieldScreen):
    system = StringProperty("us")
    target = StringProperty("")
    data_dir = StringProperty("")
    area = StringProperty("")
    note = StringProperty("")

    def refresh(self):
        self.system = self.service.system
        self.note = views.target_note(self.system)
        self.target = values.fmt(self.service.target, "pressure", self.system)
        self.data_dir = str(self.app.data_dir)
        self.area = self.app.area_summary()

    def set_units(self, system):
        self.show(self.service.set_units(system))

    def set_target(self, text):
        self.show(self.service.set_target(text))
