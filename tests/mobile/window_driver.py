"""Drive the real app window like a crew would, then print what the screen shows as JSON.

``python window_driver.py enter DATA_DIR OUT.json``: start the app (demo area), tap NEW TEST, tap
each safety item of the checklist and ALL DONE, pick the gauge hydrant on the map and the flow hydrant from the nearest-first list
(two outlets), enter static 72 and residual 58, start the flow timer, enter pitots 18 and 20, stop
the timer, read the labels, finish the test - counting every tap.
``python window_driver.py plan DATA_DIR OUT.json PLAN.csv``: start the app (demo area), load the
plan, show it on the map, report the marks and where they are drawn, and take a screenshot.
``python window_driver.py find DATA_DIR OUT.json TEST_ID``: start the app on the same data folder,
find the test in the home list and open it, correct it (reason, CORRECT, confirm), check the reason
box of another test, the export plan and a stale message; then load the demo network as LOAD AREA
does.

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
    tap_xy(x, y, f"{type(widget).__name__} {getattr(widget, 'text', '')[:30]!r}")


def tap_xy(x, y, what=""):
    """One touch down and up at window position (x, y); counted while ``report['counting']``."""
    touch = UnitTestTouch(x, y)
    touch.touch_down()
    touch.touch_up()
    report["steps"].append(f"tap {what} at {x:.0f},{y:.0f}")
    if report.get("counting"):
        report["taps"] = report.get("taps", 0) + 1


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


def enter_readings(readings, values):
    """Type each value on the keypad and SAVE it, keeping the prompt and the message of each."""
    pad = readings.ids.keypad
    for value in values:
        report.setdefault("prompts", []).append(readings.prompt)
        yield from type_on(pad, value)
        tap(pad.ids.enter)
        yield
        report.setdefault("messages", []).append(readings.message)


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
    """A two-outlet test from NEW TEST to FINISH, as a crew taps it; every tap is counted."""
    yield from touch_sizes(app)
    home = app.root.get_screen("home")
    report["counting"] = True
    tap(home.ids.new_test)
    yield from wait_for(lambda: app.root.current == "checklist")
    yield from settle()
    checklist = app.root.get_screen("checklist")
    report["crew_carried_over"] = app.service.header(app.test_id)["crew"]
    # ALL DONE before the safety items (a tap a crew might make; not counted): refused, named, stays
    report["counting"] = False
    tap(checklist.ids.all_done)
    yield from wait_for(lambda: checklist.bad and checklist.message)
    report["all_done_first"] = checklist.message
    report["screen_after_all_done_first"] = app.root.current
    report["counting"] = True
    # each safety item confirmed by its own tap, then ALL DONE ticks the rest and goes on to the map
    from mobile.services.checklist import ITEMS
    for item in [i for i in ITEMS if i.safety]:
        yield from tap_until(lambda: next(r for r in rows(checklist.ids.item_list) if r.key == item.key),
                             lambda: app.service.header(app.test_id)["checklist"][item.key], tries=1)
    report["safety_ticked_by_taps"] = [i.key for i in ITEMS if i.safety
                                       and app.service.header(app.test_id)["checklist"][i.key]]
    tap(checklist.ids.all_done)
    yield from wait_for(lambda: app.root.current == "map")
    report["unticked"] = [r["key"] for r in checklist.rows if not r["ticked"]]
    yield from settle(5)
    # The map: zoom in once, tap the gauge hydrant where it is drawn, add it as gauge.
    mp = app.root.get_screen("map")
    netmap = mp.ids.netmap
    tap(mp.ids.zoom_in)
    yield from settle()
    # the hydrant drawn nearest the middle of the map stays in view after the zoom
    mid = netmap.view.to_map(*netmap.plane.to_local(*netmap.center))
    gauge = netmap.data.nearest(*mid, hydrants_only=True)
    x, y = netmap.to_window(*netmap.tap_at_node(gauge))
    tap_xy(x, y, f"map at {gauge}")
    yield from wait_for(lambda: mp.picked == gauge)
    report["map_picked"] = mp.picked
    tap(mp.ids.as_gauge)
    yield from wait_for(lambda: mp.view["gauges"] == [gauge])
    report["map_gauges"] = list(mp.view["gauges"])
    yield from settle()
    # The nearest-first list beside the map: the nearest hydrant to the gauge flows, two outlets.
    near = mp.ids.near_list
    report["nearby"] = [r["key"] for r in mp.nearby]
    flow = mp.nearby[0]["key"]
    yield from tap_until(lambda: next(r for r in rows(near) if r.key == flow),
                         lambda: mp.picked == flow)
    tap(mp.ids.as_outlet)
    yield from wait_for(lambda: mp.view["flows"] == [flow])
    tap(mp.ids.as_outlet)
    yield from wait_for(lambda: len(app.service.outlets(app.test_id)) == 2)
    report["map_message"] = mp.message
    yield from settle()
    tap(mp.ids.to_readings)
    yield from wait_for(lambda: app.root.current == "readings")
    yield from settle()
    readings = app.root.get_screen("readings")
    yield from enter_readings(readings, ("72", "58"))  # static and residual
    tap(readings.ids.timer_button)  # START FLOW: the hydrant is open
    yield from wait_for(lambda: readings.flowing)
    yield from enter_readings(readings, ("18", "20"))  # the two pitots
    tap(readings.ids.timer_button)  # STOP FLOW: closed
    yield from wait_for(lambda: not readings.flowing)
    report["timer_text"] = readings.timer
    report["row_details"] = [r["when"] for r in readings.rows]
    report["flow_label"] = readings.ids.flow.text
    report["rated_label"] = readings.ids.rated.text
    tap(readings.ids.finish)  # FINISH TEST on the readings screen, then the results show
    yield from wait_for(lambda: app.root.current == "results")
    report["counting"] = False
    report["finish_message"] = readings.message
    yield from settle()
    results = app.root.get_screen("results")
    report["results_scroll_top"] = results.ids.details.scroll_y == 1
    report["finished_button"] = results.ids.finish.text
    yield from wait_for(lambda: not results.drawing, frames=100)  # the curve comes from a worker
    report["curve_drawn"] = bool(results.curve) and os.path.exists(results.curve)
    report["test_id"] = app.test_id
    report["duration"] = app.service.header(app.test_id).get("flow_stopped_at") is not None


def popup_button(text):
    """The button labelled ``text`` of the popup now open on the window."""
    from kivy.core.window import Window
    from kivy.uix.button import Button

    for child in Window.children:
        for w in child.walk():
            if isinstance(w, Button) and w.text == text:
                return w
    raise LookupError(f"no open popup with a button {text!r}")


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
    # scrolled down, left, opened again: the results open at their top (headline, FINISH in place)
    results.ids.details.scroll_y = 0
    app.go("home")
    yield from settle()
    app.open_test(sys.argv[4])
    yield from settle()
    report["reopened_at_top"] = results.ids.details.scroll_y == 1
    report["rated_label"] = results.ids.rated.text
    report["status"] = app.test_status(app.test_id)
    # A correction: a reason, CORRECT, the question, YES.
    results.ids.reason.text = "residual re-read"
    yield from tap_until(lambda: results.ids.correct, lambda: results.asking is not None)
    yield from settle()
    report["asked"] = results.asking.question if results.asking else ""
    report["status_while_asked"] = app.test_status(app.test_id)
    tap(popup_button("YES, REOPEN"))
    yield from wait_for(lambda: "revision 2" in app.test_status(app.test_id))
    report["status_after"] = app.test_status(app.test_id)
    report["reason_after"] = results.ids.reason.text
    # A refused reading shows its message in a place kept for it: the keypad does not move.
    app.go("readings")
    yield from settle()
    readings = app.root.get_screen("readings")
    pad = readings.ids.keypad
    before = pad.ids.enter.to_window(*pad.ids.enter.pos)
    yield from type_on(pad, "999")
    tap(pad.ids.enter)
    yield from wait_for(lambda: readings.bad and readings.message)
    yield from settle()
    report["refused_reading"] = readings.message
    report["keypad_moved"] = pad.ids.enter.to_window(*pad.ids.enter.pos) != before
    app.go("results")
    yield from settle()
    # Another test: its reason box is empty.
    results.ids.reason.text = "typed for the first test"
    other = next(t.test_id for t in app.store.tests() if t.test_id != app.test_id)
    app.open_test(other)
    yield from settle()
    report["other_reason"] = results.ids.reason.text
    # The export screen says what it will do with the test under correction.
    app.go("export")
    yield from settle()
    report["export_plan"] = app.root.get_screen("export").plan
    # LOAD AREA's dialog has a visible cancel that closes it.
    app.go("home")
    yield from settle()
    popup = app.pick_area()
    yield from settle()
    tap(popup_button("CANCEL: KEEP THE AREA LOADED NOW"))
    try:  # one tap; the popup fades out (Kivy's ModalView animates its dismissal) before it leaves
        yield from wait_for(lambda: popup.parent is None, frames=60)
    except AssertionError:
        pass
    report["area_dialog_closed"] = popup.parent is None
    # LOAD AREA's load runs in a worker; the home screen says so, then shows the outcome.
    from mobile.services import demo
    app.load_area(demo.TALLOWMERE)
    report["load_message_at_once"] = home.message
    yield from wait_for(lambda: not home.message.startswith("Loading"), frames=100)
    report["load_message"] = home.message
    report["area_summary"] = app.area_summary()
    # A stale message: refused id, then a pick clears it.
    app.open_test(sys.argv[4])
    app.go("setup")
    yield from settle()
    setup = app.root.get_screen("setup")
    setup.ids.hsearch.text = "QQ-9"
    yield from settle()
    tap(setup.ids.as_gauge)
    yield from wait_for(lambda: setup.bad and setup.message)
    report["refused"] = setup.message
    setup.ids.hsearch.text = ""
    yield from settle()
    yield from tap_until(lambda: rows(setup.ids.hydrant_list)[0],
                         lambda: setup.picked == rows(setup.ids.hydrant_list)[0].key)
    report["after_pick"] = setup.message


def script_plan(app):
    """Load an office plan (as the PLAN button's file browser hands it over), tap SHOW THE PLAN ON
    THE MAP, and keep what the map shows: the marks, where each is drawn, and a screenshot."""
    from kivy.core.window import Window

    home = app.root.get_screen("home")
    yield from settle()
    popup = app.show_plan(sys.argv[4])
    yield from settle()
    report["plan_message"] = home.message
    report["plan_buttons"] = [w.text for w in popup.walk() if hasattr(w, "tone")]
    tap(popup_button("SHOW THE PLAN ON THE MAP"))
    yield from wait_for(lambda: app.root.current == "map")
    yield from settle(8)
    mp = app.root.get_screen("map")
    netmap = mp.ids.netmap
    report["map_title"] = mp.view["title"]
    report["legend"] = mp.view["legend"]
    report["as_gauge_disabled"] = mp.ids.as_gauge.disabled
    report["marks"] = [dict(m, window=list(netmap.to_window(*netmap.tap_at_node(m["node"]))))
                       for m in mp.view["planned"]]
    report["window_size"] = list(Window.size)
    yield
    report["screenshot"] = Window.screenshot(name=os.path.join(os.path.dirname(out_path), "plan-map.png"))
    yield


class DrivenApp(FieldApp):
    def on_start(self):
        steps = {"enter": script_enter, "find": script_find, "plan": script_plan}[mode](self)

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
    DrivenApp(data_dir=data_dir, demo_mode=(mode in ("enter", "plan"))).run()
except Exception:  # noqa: BLE001
    report["error"] = traceback.format_exc()
with open(out_path, "w") as fh:
    json.dump(report, fh, indent=1)
