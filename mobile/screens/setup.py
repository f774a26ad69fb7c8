"""Test set-up: id and time, crew, gauge and flow hydrants from the area's list, outlets, notes."""

from kivy.properties import DictProperty, ListProperty, StringProperty

from mobile.screens.base import FieldScreen
from mobile.services import outlets, views


class SetupScreen(FieldScreen):
    view = DictProperty(views.EMPTY_SETUP)
    hydrants = ListProperty([])
    picked = StringProperty("")
    picked_outlet = StringProperty("")
    sizes = ListProperty(outlets.sizes("us"))
    diameter_unit = StringProperty("in")
    length_unit = StringProperty("ft")
    sources = ListProperty([])
    tank_by = StringProperty("level")  # what the crew types for a tank: its level or its grade
    tank_range = StringProperty("")

    def refresh(self):
        if not self.tid:
            return
        self.view = views.setup_view(self.service, self.tid)
        self.hydrants = views.hydrant_rows(self.service.area, self.ids.hsearch.text)
        self.sizes = outlets.sizes(self.service.system)
        self.diameter_unit = self.service.unit_of("diameter")
        self.length_unit = self.service.unit_of("gauge_height")
        self.sources = self.service.sources()
        self.tank_range = self.service.tank_range(self.ids.source.text)

    def on_pre_enter(self, *args):
        super().on_pre_enter(*args)
        self.fill_boxes(views.setup_boxes(self.service, self.tid, self.ids.source.text))

    def fill_boxes(self, boxes):
        """The typed boxes re-shown from what is saved, in the units now chosen."""
        self.ids.height.text, self.ids.grade.text, self.tank_by = boxes["height"], boxes["tank"], boxes["tank_by"]

    def pick(self, hydrant):
        self.picked, self.message = hydrant, ""  # a message about the last pick is stale now
        self.show_outlet(self.service.remembered_outlet(hydrant))

    def show_outlet(self, o):
        """The outlet last used on the picked hydrant, ready to add again."""
        self.ids.diameter.text, self.ids.shape.text, self.ids.kind.text = o["diameter"], o["shape"], o["kind"]
        self.ids.pumper.state = "down" if o["pumper"] else "normal"

    def search(self):
        self.picked, self.message = "", ""
        self.refresh()

    def save_text(self, name, text):
        self.show(self.service.set_field(self.tid, name, text))

    def chosen(self) -> str:
        """The hydrant tapped in the list, or else the id typed in the search field."""
        return self.picked or self.ids.hsearch.text

    def add_gauge(self):
        self.show(self.service.add_gauge(self.tid, self.chosen()))

    def add_outlet(self):
        self.show(self.service.add_outlet(self.tid, self.chosen(), self.ids.diameter.text,
                                          self.ids.shape.text, self.ids.kind.text,
                                          self.ids.pumper.state == "down"))

    def remove_gauge(self, hydrant):
        self.show(self.service.remove_gauge(self.tid, hydrant))

    def remove_outlet(self, uid):
        self.show(self.service.remove_outlet(self.tid, uid))

    def set_height(self, text):
        self.show(self.service.set_gauge_height(self.tid, text))

    def source_changed(self, source):
        self.fill_boxes(views.setup_boxes(self.service, self.tid, source))
        self.refresh()

    def set_tank_by(self, what):
        self.tank_by = what

    def set_tank(self, source, text):
        self.show(self.service.set_source(self.tid, source, text, self.tank_by))

    def clear_tank(self, source):
        self.show(self.service.clear_source(self.tid, source))
        self.ids.grade.text = ""
