"""Home: the list of tests (today or all, search by hydrant), new test, load area, export."""

from kivy.properties import ListProperty, StringProperty

from mobile.screens.base import FieldScreen
from mobile.services import views


class HomeScreen(FieldScreen):
    rows = ListProperty([])
    when = StringProperty("today")
    area_text = StringProperty("")
    areas = ListProperty([views.ALL_AREAS])

    def refresh(self):
        self.areas = [views.ALL_AREAS] + self.service.areas()
        self.rows = views.test_rows(self.service, self.when, self.ids.search.text,
                                    self.ids.area.text)
        self.area_text = self.app.area_summary()

    def set_when(self, when):
        self.when = when
        self.refresh()
