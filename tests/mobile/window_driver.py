"""Drive the real app window like a crew would, then print what the screen shows as JSON.

``python window_driver.py enter DATA_DIR OUT.json``: start the app (demo area), tap NEW TEST, tick
the checklist, pick a gauge and a flow hydrant, enter static 72, residual 58 and pitot 22 on the
keypad by key presses, read the discharge and rated-flow labels, finish the test.
``python window_driver.py find DATA_DIR OUT.json``: start the app on the same data folder, read the
home list and open the test there; then load the demo network as LOAD AREA does.

Taps are real touch events sent through the window (kivy.tests.common.UnitTestTouch), so a button
that is hidden, covered or too small to hit would fail the run.
"""

import json
import os
import sys
import traceback

os.environ.setdefault("KIVY_NO_ARGS", "1")

from kivy.clock import Clock  # noqa: E402
from kivy.config import Config  # noqa: E402

Config.set("graphics", "width", "1280")
Config.set("graphics", "height", "800")

from kivy.tests.common import UnitTestTouch  # noqa: E402

from mobile.app import FieldApp  # noqa: E402

mode, data_dir, out_path = sys.argv[1], sys.argv[2], sys.argv[3]
report = {"mode": mode, "steps": []}


def tap(widget):
    x, y = widget.to_window(*widget.center)
    touch = UnitTestTouch(x, y)
    touch.touch_down()
    touch.touch_up()
    report["steps"].append(f"tap {type(widget).__name__} {getattr(widget, 'text', '')[:30]!r}")


def rows(rv):
    """The row widgets a RecycleView shows now (top to bottom, left to right)."""
    return sorted(rv.children[0].children, key=lambda w: (-round(w.y), w.x))


def visible(rv, widget):
    """True when the widget's centre lies inside the RecycleView's area on the window."""
    x, y = widget.to_window(*widget.center)
    left, bottom = rv.to_window(rv.x, rv.y)
    return left <= x <= left + rv.width and bottom <= y <= bottom + rv.height


def key(keypad, label):
    from kivy.uix.button import Button

    for b in keypad.walk():
        if isinstance(b, Button) and b.text == label:
            return b
    raise LookupError(f"no key {label!r}")


def wait_for(condition, frames: int = 25):
    """Yield (let the app run) until ``condition()`` holds; a ScrollView holds taps back a moment."""
    for _ in range(frames):
        yield
        if condition():
            return
    raise AssertionError("timed out waiting for the screen to react")


def tap_until(find, condition, tries: int = 3):
    """Tap ``find()`` until ``condition()`` holds (a list may re-lay itself out under the finger)."""
    for _ in range(tries):
        tap(find())
        for _ in range(10):
            yield
            if condition():
                return
    raise AssertionError("the screen did not react to the tap")


def settle(frames: int = 3):
    """Let a newly shown screen lay itself out before tapping it."""
    for _ in range(frames):
        yield


def type_on(keypad, text):
    for ch in text:
        tap(key(keypad, ch))
        yield


def touch_sizes(app):
    """Smallest side [dp] of every visible tappable widget on every screen (a 48 dp target rule)."""
    from kivy.metrics import dp
    from kivy.uix.behaviors import ButtonBehavior
    from kivy.uix.textinput import TextInput

    from mobile.screens import SCREENS

    small, checked = [], 0
    for name in SCREENS:
        app.go(name)
        yield from settle()
        for w in app.root.get_screen(name).walk():
            if isinstance(w, (ButtonBehavior, TextInput)) and w.opacity > 0 and w.width > 0:
                side = min(w.width, w.height) / dp(1)
                checked += 1
                if side < 48:
                    small.append(f"{name}: {type(w).__name__} {getattr(w, 'text', '')[:20]!r} {side:.0f} dp")
    report["small_targets"], report["targets_checked"] = small, checked
    app.go("home")
    yield from settle()


def script_enter(app):
    yield from touch_sizes(app)
    home = app.root.get_screen("home")
    tap(home.ids.new_test)
    yield from wait_for(lambda: app.root.current == "checklist")
    yield from settle()
    checklist = app.root.get_screen("checklist")
    rv = checklist.ids.item_list
    for item in [r["key"] for r in checklist.rows]:
        row = [r for r in rows(rv) if r.key == item and visible(rv, r)]
        if not row:  # scroll down to the rest of the list, as a crew would
            rv.scroll_y = 0
            yield
            row = [r for r in rows(rv) if r.key == item and visible(rv, r)]
        tap(row[0])
        yield from wait_for(lambda: any(r["key"] == item and r["ticked"] for r in checklist.rows))
    report["unticked"] = [r["key"] for r in checklist.rows if not r["ticked"]]
    tap(checklist.ids.to_setup)
    yield from wait_for(lambda: app.root.current == "setup")
    yield from settle()
    setup = app.root.get_screen("setup")
    setup.ids.crew.text = "Window Test Crew"
    setup.ids.crew.dispatch("on_text_validate")
    yield from settle()
    hl = setup.ids.hydrant_list
    first, second = (r.key for r in rows(hl)[:2])
    yield from tap_until(lambda: next(r for r in rows(hl) if r.key == first),
                         lambda: setup.picked == first)
    tap(setup.ids.as_gauge)
    yield from wait_for(lambda: setup.view["gauges"] == [first])
    yield from settle()
    yield from tap_until(lambda: next(r for r in rows(hl) if r.key == second),
                         lambda: setup.picked == second)
    tap(setup.ids.as_outlet)
    yield from wait_for(lambda: len(setup.view["outlets"]) == 1)
    report["setup_message"] = setup.message
    tap(setup.ids.to_readings)
    yield from wait_for(lambda: app.root.current == "readings")
    yield from settle()
    readings = app.root.get_screen("readings")
    pad = readings.ids.keypad
    for value in ("72", "58", "22"):
        report.setdefault("prompts", []).append(readings.prompt)
        yield from type_on(pad, value)
        tap(pad.ids.enter)
        yield
        report.setdefault("messages", []).append(readings.message)
    report["flow_label"] = readings.ids.flow.text
    report["rated_label"] = readings.ids.rated.text
    tap(readings.ids.to_results)
    yield from wait_for(lambda: app.root.current == "results")
    yield from settle()
    results = app.root.get_screen("results")
    yield from wait_for(lambda: not results.drawing, frames=100)  # the curve comes from a worker
    report["curve_drawn"] = bool(results.curve) and os.path.exists(results.curve)
    tap(results.ids.finish)
    yield from wait_for(lambda: results.message)
    report["finish_message"] = results.message
    report["test_id"] = app.test_id


def script_find(app):
    home = app.root.get_screen("home")
    yield from settle()
    tap(home.ids.all)  # the test may have been logged on another day
    yield from wait_for(lambda: home.when == "all")
    yield from settle()
    report["home_rows"] = [r.text for r in rows(home.ids.list)]
    target = [r for r in rows(home.ids.list) if r.key == sys.argv[4]]
    tap(target[0])
    yield
    report["screen"] = app.root.current
    results = app.root.get_screen("results")
    report["rated_label"] = results.ids.rated.text
    report["status"] = app.test_status(app.test_id)
    # LOAD AREA's load runs in a worker; the home screen says so, then shows the outcome.
    from mobile.services import demo
    app.load_area(demo.TALLOWMERE)
    report["load_message_at_once"] = home.message
    yield from wait_for(lambda: not home.message.startswith("Loading"), frames=100)
    report["load_message"] = home.message
    report["area_summary"] = app.area_summary()


class DrivenApp(FieldApp):
    def on_start(self):
        steps = (script_enter if mode == "enter" else script_find)(self)

        def step(dt):
            try:
                next(steps)
            except StopIteration:
                report["ok"] = True
                self.stop()
                return False
            except Exception:  # noqa: BLE001 - reported to the test
                report["error"] = traceback.format_exc()
                self.stop()
                return False
        Clock.schedule_interval(step, 0.1)


try:
    DrivenApp(data_dir=data_dir, demo_mode=(mode == "enter")).run()
except Exception:  # noqa: BLE001
    report["error"] = traceback.format_exc()
with open(out_path, "w") as fh:
    json.dump(report, fh, indent=1)
