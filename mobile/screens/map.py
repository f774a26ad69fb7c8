"""Map: the area's network drawn from its coordinates; tap a hydrant to pick it as gauge or flow
hydrant; hydrants nearest first from where the crew stands (the device's location, or a tap)."""

from kivy.clock import mainthread
from kivy.properties import DictProperty, ListProperty, ObjectProperty, StringProperty

from mobile.screens.base import FieldScreen
from mobile.services import location, mapdata, views


class MapScreen(FieldScreen):
    data = ObjectProperty(None, allownone=True)
    picked = StringProperty("")
    nearby = ListProperty([])
    here = ListProperty([])
    view = DictProperty(views.EMPTY_MAP)

    _data_for = None

    def refresh(self):
        if self._data_for is not self.service.area:  # another area loaded: draw it afresh
            self.data, self._data_for = mapdata.MapData.from_area(self.service.area), self.service.area
        self.view = views.map_view(self.service, self.tid, self.data, self.picked, self.here)
        self.nearby = self.view["nearby"]

    def pick(self, node_id):
        self.picked, self.message = node_id, ""
        self.refresh()

    def point(self, x, y):
        self.here, self.picked, self.message = [x, y], "", ""
        self.refresh()

    def add_gauge(self):
        self.show(self.service.add_gauge(self.tid, self.picked))

    def add_outlet(self):
        self.show(self.service.add_remembered_outlet(self.tid, self.picked))

    def locate(self):
        location.start(self.located, self.status)

    @mainthread
    def located(self, lon, lat):
        outcome, self.here = views.located(self.data, lon, lat)
        self.show(outcome)

    @mainthread
    def status(self, text):
        self.message, self.bad = text, True
