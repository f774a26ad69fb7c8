"""The Kivy application: builds the store and the service, hands them to the screens, navigates.

The app object holds the navigation state (which test is open) and the few actions that span
screens (new test, open a test, load an area, export, the curve image). Computation lives in
``mobile.services``; layout in the ``.kv`` files.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from kivy.app import App
from kivy.clock import Clock, mainthread
from kivy.core.window import Window
from kivy.lang import Builder
from kivy.logger import Logger
from kivy.properties import StringProperty
from kivy.factory import Factory
from kivy.metrics import dp
from kivy.uix.boxlayout import BoxLayout
from kivy.uix.popup import Popup
from kivy.uix.screenmanager import NoTransition, ScreenManager

from calib.errors import CalibError

from mobile.screens import SCREENS
from mobile.screens.check import CheckScreen
from mobile.screens.checklist import ChecklistScreen
from mobile.screens.export import ExportScreen
from mobile.screens.home import HomeScreen
from mobile.screens.map import MapScreen
from mobile.screens.readings import ReadingsScreen
from mobile.screens.results import ResultsScreen
from mobile.screens.settings import SettingsScreen
from mobile.screens.setup import SetupScreen
from mobile.services import background, curve, demo, export, mapdata
from mobile.services.area import Area
from mobile.services.session import Outcome, TestService, _first_message
from mobile.store import Store
from mobile.widgets import common, folders, keypad, netmap  # noqa: F401 - registers the widget classes for kv
from mobile.widgets.folders import FolderBrowser

HERE = Path(__file__).resolve().parent
#: Environment variable that overrides the data folder (used by the tests).
DATA_ENV = "HYDRANT_FIELD_DATA"
CLASSES = {"home": HomeScreen, "checklist": ChecklistScreen, "setup": SetupScreen, "map": MapScreen,
           "readings": ReadingsScreen, "results": ResultsScreen, "check": CheckScreen,
           "export": ExportScreen, "settings": SettingsScreen}
_KV_LOADED = False


def load_kv() -> None:
    global _KV_LOADED
    if _KV_LOADED:
        return
    for path in [HERE / "widgets" / f"{w}.kv" for w in ("common", "keypad", "folders")] + \
            [HERE / "screens" / f"{name}.kv" for name in SCREENS]:
        Builder.load_file(str(path))
    _KV_LOADED = True


class HydrantFieldApp(App):
    """Kivy names the data folder after the class: ``~/.config/HydrantField`` on Linux."""

    title = "Hydrant flow tests"
    test_id = StringProperty("")

    def __init__(self, data_dir=None, demo_mode: bool = False, snapshot_dir=None, **kwargs):
        super().__init__(**kwargs)
        self.demo_mode = demo_mode or snapshot_dir is not None
        self.snapshot_dir = Path(snapshot_dir) if snapshot_dir else None
        self._data_dir_arg = data_dir
        self.snapshots: list[str] = []
        self.area_problem = ""  # why the area used last did not load at start, if it did not

    # --- set-up ------------------------------------------------------------------------------
    def resolve_data_dir(self) -> Path:
        if self._data_dir_arg:
            return Path(self._data_dir_arg)
        if os.environ.get(DATA_ENV):
            return Path(os.environ[DATA_ENV])
        if self.snapshot_dir is not None:
            return Path(tempfile.mkdtemp(prefix="field-snapshot-"))
        base = Path(self.user_data_dir)
        return base / "demo" if self.demo_mode else base

    def build(self):
        Window.clearcolor = (1, 1, 1, 1)
        Window.bind(on_keyboard=self._on_key)
        load_kv()
        self.data_dir = self.resolve_data_dir()
        self.store = Store.open(self.data_dir)
        self.service = TestService(self.store, self._initial_area())
        if self.demo_mode and not self.store.tests():
            made = demo.log_demo_tests(self.service, self.service.area)
            self.test_id = made[-1] if made else ""
        sm = ScreenManager(transition=NoTransition())
        for name in SCREENS:
            sm.add_widget(CLASSES[name](name=name))
        if self.snapshot_dir is not None:
            Clock.schedule_once(lambda dt: self._snapshot(list(SCREENS)), 1.0)
        return sm

    def _initial_area(self) -> Area:
        if self.demo_mode:
            return demo.demo_area()
        path = self.store.get_setting("area_path")
        if path:
            try:
                return Area.load(path)
            except (CalibError, OSError) as exc:  # moved or edited since: say so on the home screen
                self.area_problem = f"The area used last ({path}) could not be read: " + \
                    _first_message(exc)
        return Area("No area loaded")

    def _on_key(self, window, key, *args):
        if key == 27 and self.root and self.root.current != "home":  # Android back / Esc
            self.go("home")
            return True
        return False

    # --- navigation and cross-screen actions -------------------------------------------------
    def go(self, name: str) -> None:
        if name != "home" and name not in ("settings", "export") and not self.test_id and \
                not (name == "map" and self.service.plan):  # the map shows a loaded plan with no test open
            name = "home"
        if self.root.current == name:  # e.g. another test opened on the same screen: show it afresh
            self.root.get_screen(name).on_pre_enter()
        self.root.current = name

    def setup_screen(self) -> str:
        """Where hydrants are picked first: the map when the area has one, else the set-up list."""
        return "map" if mapdata.MapData.from_area(self.service.area) is not None else "setup"

    def new_test(self) -> None:
        try:
            self.test_id = self.service.new_test()
        except CalibError as exc:
            self.root.get_screen("home").show(Outcome(False, _first_message(exc)))
            return
        self.go("checklist")

    def open_test(self, tid: str) -> None:
        self.test_id = tid
        self.go("results" if self.store.test(tid).status == "finished" else "readings")

    def test_status(self, tid: str) -> str:
        t = self.store.test(tid)
        return ("finished" if t.status == "finished" else "DRAFT") + \
            (f", revision {t.current_revision}" if t.current_revision > 1 else "")

    def area_summary(self) -> str:
        a = self.service.area
        if a.network is None and not a.hydrants:
            return (self.area_problem + "\n" if self.area_problem else "") + \
                "No area loaded: tap LOAD AREA to pick the office network (folder or .geojson)."
        return f"Area {a.name}: {len(a.hydrants)} hydrants" + \
            (", network loaded (model check available)" if a.network is not None else "")

    def pick_area(self) -> None:
        start = self.store.get_setting("area_path") or str(demo.TALLOWMERE.parent)
        browser = FolderBrowser(path=str(Path(start).parent) if Path(start).exists() else str(Path.home()),
                                suffixes=[".geojson"], action="LOAD THIS NETWORK FOLDER")
        box = BoxLayout(orientation="vertical", spacing=dp(6))
        box.add_widget(browser)
        cancel = Factory.BigButton(text="CANCEL: KEEP THE AREA LOADED NOW", tone="grey")
        box.add_widget(cancel)
        popup = Popup(title="Tap a .geojson file, or open a network folder and load it",
                      title_size="20sp", content=box, size_hint=(0.95, 0.95))
        browser.bind(on_choose=lambda _, path: (popup.dismiss(), self.load_area(path)))
        cancel.bind(on_release=lambda *_: popup.dismiss())
        popup.open()
        return popup

    def pick_plan(self) -> None:
        """Pick an office plan.csv (python -m calib plan) and offer its tests as the day's list."""
        start = self.store.get_setting("plan_path") or self.store.get_setting("area_path") or str(Path.home())
        browser = FolderBrowser(path=str(Path(start).parent) if Path(start).exists() else str(Path.home()),
                                suffixes=[".csv"], action="USE plan.csv IN THIS FOLDER")
        popup = Popup(title="Tap the plan.csv from the office", title_size="20sp", content=browser,
                      size_hint=(0.95, 0.95))
        browser.bind(on_choose=lambda _, path: (popup.dismiss(), self.show_plan(path)))
        popup.open()

    def show_plan(self, path):
        """The plan's tests in order, each a button that starts it, and one that shows the plan on the
        map (plain service calls); returns the popup."""
        from kivy.uix.boxlayout import BoxLayout
        from mobile.services import plan as plans
        from mobile.widgets.common import BigButton
        try:
            planned = plans.load(self.service, path)
        except CalibError as exc:
            self.root.get_screen("home").show(Outcome(False, "Could not load the plan: " + _first_message(exc)))
            return None
        self.store.set_setting("plan_path", str(path))
        box = BoxLayout(orientation="vertical", spacing=8)
        popup = Popup(title=f"Today's plan: {len(planned)} tests", title_size="20sp", content=box,
                      size_hint=(0.95, 0.95))
        on_map = BigButton(text="SHOW THE PLAN ON THE MAP", tone="grey")
        on_map.bind(on_release=lambda *_: (popup.dismiss(), self.show_plan_map()))
        box.add_widget(on_map)
        from kivy.uix.gridlayout import GridLayout
        from kivy.uix.scrollview import ScrollView
        scroll, tests = ScrollView(bar_width=dp(12), scroll_type=["bars", "content"]), \
            GridLayout(cols=1, spacing=8, size_hint_y=None)
        tests.bind(minimum_height=tests.setter("height"))
        scroll.add_widget(tests)
        box.add_widget(scroll)
        for row, p in zip(plans.day_rows(self.service, planned), planned):
            done = f"  [{row['test_id']}]" if row["test_id"] else ""
            button = BigButton(text=f"{row['order']}. {p.test_id}: flow {', '.join(p.flow_nodes)} "
                                    f"{row['flow']}; gauges {', '.join(p.gauge_nodes)}{done}")
            button.bind(on_release=lambda _, p=p: (popup.dismiss(),
                                                    self.open_test(plans.start_planned(self.service, p))))
            tests.add_widget(button)
        popup.open()
        return popup

    def show_plan_map(self) -> None:
        """The map with the day's plan alone (no test open: its picks cannot change a test)."""
        self.test_id = ""
        self.go("map")

    def load_area(self, path):
        """Read the network in a worker (a large one takes a while); the home screen shows the outcome."""
        self.root.get_screen("home").show(Outcome(True, f"Loading {Path(path).name} ..."))
        return background.start(lambda: Area.load(path), lambda got: self._area_loaded(path, got),
                                lambda exc: exc, name="load-area")

    @mainthread
    def _area_loaded(self, path, area) -> None:
        try:
            if isinstance(area, Exception):
                raise area
            self.store.set_setting("area_path", str(path))
        except (CalibError, OSError) as exc:
            outcome = Outcome(False, "Could not load the area: " + _first_message(exc))
        else:
            self.service.area, self.area_problem = area, ""
            outcome = Outcome(True, f"Loaded {area.name}: {len(area.hydrants)} hydrants")
        self.root.get_screen("home").show(outcome)

    def curve_png(self, tid: str, on_done) -> None:
        """Call ``on_done(tid, path)`` with the test's curve image ('' while it cannot be drawn).

        A cached image is handed back at once; a new one is drawn in a worker (``on_done`` is then
        called there: the screen makes it safe for the UI). The store is read here, never off thread.
        """
        results, system = self.service.results(tid), self.service.system
        path = curve.cache_path(results, self.data_dir / "cache", tid, system)
        if path.exists():
            on_done(tid, str(path))
            return
        for old in path.parent.glob(f"{tid}-*.png"):  # earlier states of this test
            if old != path:  # (a worker may be writing this one right now)
                old.unlink(missing_ok=True)

        def failed(exc):
            Logger.warning(f"FieldApp: the curve of {tid} could not be drawn: {exc}")
            return ""
        background.start(lambda: str(path) if curve.render_curve(results, path, system) else "",
                         lambda made: on_done(tid, made), failed, name=f"curve-{tid}")

    def default_export_folder(self) -> str:
        return str(self.data_dir / "export")

    def export_to(self, folder: str, include_drafts: bool = False) -> Outcome:
        try:
            done = export.export_tests(self.service, folder, include_drafts)
        except (CalibError, OSError) as exc:
            return Outcome(False, f"Export failed: {exc}. Each file is either the old or the new one, "
                                  "never half-written; export again to bring them all up to date.")
        return Outcome(True, export.done_message(done))

    # --- snapshot mode -----------------------------------------------------------------------
    def _snapshot(self, todo: list[str]) -> None:
        """Show each main screen in turn, save a PNG of it into ``snapshot_dir``, then stop."""
        if not todo:
            self.stop()
            return
        name = todo[0]
        self.go(name)
        screen = self.root.get_screen(name)
        if name == "check":
            screen.run()

        def shoot(dt):
            if screen.busy:
                Clock.schedule_once(shoot, 0.3)
                return
            self.snapshot_dir.mkdir(parents=True, exist_ok=True)
            target = self.snapshot_dir / f"{SCREENS.index(name) + 1:02d}-{name}.png"
            made = Window.screenshot(name=str(self.snapshot_dir / f".{name}.png"))
            if made:
                os.replace(made, target)
                self.snapshots.append(str(target))
            Clock.schedule_once(lambda dt: self._snapshot(todo[1:]), 0.1)

        Clock.schedule_once(shoot, 0.6)


FieldApp = HydrantFieldApp
