"""The report's figures drawn in a worker process are the figures drawn here, and a worker that is
gone or fails costs nothing but time (the figure is drawn here)."""

import base64

import numpy as np
import pytest

from calib.calibration import figures
from calib.figure_worker import FigureWorker


def _data():
    rng = np.random.default_rng(1)
    sim = rng.uniform(40, 80, 12)
    return dict(sim=sim, obs=sim + rng.normal(0, 1, 12), kind=np.array(["static", "residual"] * 6),
                flagged=np.arange(12) == 5, pu="psi", band=2.0)


def _is_png(text):
    return base64.b64decode(text)[:8] == b"\x89PNG\r\n\x1a\n"


def test_worker_draws_the_same_png_as_this_process():
    data = _data()
    here = figures.draw("observed vs simulated", data)
    worker = FigureWorker.start()
    assert worker is not None
    try:
        worker.submit("observed vs simulated", data)
        there = worker.result("observed vs simulated")
        assert worker._done["observed vs simulated"][0]  # drawn by the worker, not redrawn here
    finally:
        worker.close()
    assert _is_png(there) and there == here
    assert worker._proc.returncode == 0  # ended by the end of its input


def test_an_error_in_the_worker_is_raised_here_and_a_dead_worker_leaves_the_figure_here():
    data = _data()
    worker = FigureWorker.start()
    try:
        # an error there is answered as text; the figure is drawn again here, where it raises
        worker.submit("observed vs simulated", dict(data, sim=None))
        with pytest.raises(TypeError):
            worker.result("observed vs simulated")
        assert worker._done["observed vs simulated"][0] is False
        worker._proc.kill()  # gone before answering: the figure is drawn here
        worker._proc.wait()
        worker.submit("residuals by test", dict(x=np.arange(3.0), z=np.zeros(3),
                                                kind=np.array(["static"] * 3),
                                                flagged=np.zeros(3, bool), threshold=3.0,
                                                test_ids=["T1", "T2", "T3"]))
        assert _is_png(worker.result("residuals by test"))
    finally:
        worker.close()


def _curves(n_panels):
    # hydrant-curve panels as report.py builds them (display units), invented numbers
    q = np.array([0.0, 200.0, 1000.0, 1600.0])
    panel = dict(flow=q, pressure=80.0 - 1e-5 * q ** 1.85, readings=[(0.0, 80.2, False),
                                                                      (1000.0, 76.0, True)],
                 tested=1000.0, title="T1: gauge J1, 1000 gpm flowed")
    return dict(panels=[panel if k % 3 else None for k in range(n_panels)], fu="gpm", pu="psi")


def test_a_canvas_made_before_the_data_draws_the_same_png():
    # figures.LAYOUTS makes a figure's canvas before its data is known (in the worker, while the
    # fit runs); drawn on it, the PNG is byte for byte the one drawn on a fresh canvas
    data = _curves(6)
    fresh = figures.draw("hydrant curves", data)
    made = (6, figures.LAYOUTS["hydrant curves"](6))
    assert figures.draw("hydrant curves", data, made) == fresh
    # ticks made ahead (the curves' layout makes 7 on each axis) or on the draw, as matplotlib does
    for ticks in (0, 2, 12):
        assert figures.draw("hydrant curves", data, (6, figures._curves_layout(6, ticks))) == fresh
    # a canvas made for another number of panels is not used
    other = (5, figures.LAYOUTS["hydrant curves"](5))
    assert figures.draw("hydrant curves", data, other) == fresh
    assert len(other[1][0].axes) == 8 and not other[1][0].axes[0].lines  # left untouched


@pytest.mark.parametrize("lanes", [1, 2])
def test_each_lane_draws_what_this_process_draws(lanes):
    # two lanes (the second forked from the first) or one: every figure the same PNG as here,
    # each drawn by the worker, the curves on a canvas announced before their data
    if lanes == 2 and not hasattr(__import__("os"), "fork"):
        pytest.skip("no fork here: one lane only")
    curves, points = _curves(5), _data()
    worker = FigureWorker.start(lanes=lanes)
    assert worker is not None and len(worker._lanes) == lanes
    try:
        worker.layout("hydrant curves", 5)
        worker.layout("observed vs simulated")
        worker.submit("observed vs simulated", points)
        worker.submit("hydrant curves", curves)
        got = {name: worker.result(name) for name in ("hydrant curves", "observed vs simulated")}
        assert all(worker._done[name][0] for name in got)  # drawn there, not redrawn here
    finally:
        worker.close()
    assert got["hydrant curves"] == figures.draw("hydrant curves", curves)
    assert got["observed vs simulated"] == figures.draw("observed vs simulated", points)
    assert worker._proc.returncode == 0


def _running_in_group(group):
    # processes of a process group that are alive (not zombies), from /proc (Linux)
    import os
    alive = []
    for pid in filter(str.isdigit, os.listdir("/proc")):
        try:
            with open(f"/proc/{pid}/stat") as f:
                stat = f.read()
        except OSError:
            continue
        fields = stat.rsplit(")", 1)[1].split()
        if int(fields[2]) == group and fields[0] != "Z":
            alive.append(int(pid))
    return alive


def test_a_worker_closed_while_drawing_leaves_no_lane_running():
    # the command failed with a figure still wanted: both lanes end at once (one process group),
    # the forked lane too, although it is busy drawing twelve panels (0.5 s and more)
    import os
    import time
    if not (hasattr(os, "fork") and os.path.isdir("/proc/self")):
        pytest.skip("needs fork and /proc")
    worker = FigureWorker.start(lanes=2)
    worker.submit("observed vs simulated", _data())
    worker.result("observed vs simulated")  # matplotlib loaded: the second lane is forked
    group = worker._proc.pid
    assert len(_running_in_group(group)) == 2
    worker.submit("hydrant curves", _curves(12))
    time.sleep(0.1)  # the forked lane is drawing
    worker.close()
    time.sleep(0.1)
    assert worker._proc.returncode is not None
    assert _running_in_group(group) == []


@pytest.mark.parametrize("order", ["in order", "out of order", "none before"])
def test_curves_rendered_panel_by_panel_are_the_png_drawn_at_once(order):
    # CurvesInProgress renders each panel as its data comes, then the rest: byte for byte the
    # PNG that draw() makes from the whole data (empty slots, a panel left for the end, panels
    # given out of order: each rendered once those before it are)
    data = _curves(7)
    fresh = figures.draw("hydrant curves", data)
    growing = figures.CurvesInProgress(7, figures.LAYOUTS["hydrant curves"](7))
    given = {"in order": [0, 1, 2, 3, 4, 5], "out of order": [3, 1, 0, 5, 2],
             "none before": []}[order]
    for k in given:
        growing.add(k, data["panels"][k], data["fu"], data["pu"])
    assert growing.rendered == {"in order": 6, "out of order": 4, "none before": 0}[order]
    assert growing.finish(data) == fresh


def test_curves_rendered_from_other_panels_are_not_used():
    # a panel given before that is not the final data's: no PNG from it (drawn afresh instead)
    data = _curves(5)
    growing = figures.CurvesInProgress(5, figures.LAYOUTS["hydrant curves"](5))
    other = dict(data["panels"][1], pressure=data["panels"][1]["pressure"] - 1.0)
    growing.add(0, data["panels"][0], data["fu"], data["pu"])
    growing.add(1, other, data["fu"], data["pu"])
    assert growing.finish(data) is None


def test_the_worker_renders_curve_panels_as_they_come():
    # panels sent one by one (submit_part), then the whole: the worker's PNG is the one drawn here
    data = _curves(6)
    worker = FigureWorker.start()
    try:
        worker.layout("hydrant curves", 6)
        for k, panel in enumerate(data["panels"]):
            worker.submit_part("hydrant curves", (k, panel, data["fu"], data["pu"]))
        worker.submit("hydrant curves", data)
        there = worker.result("hydrant curves")
        assert worker._done["hydrant curves"][0]
    finally:
        worker.close()
    assert there == figures.draw("hydrant curves", data)


def test_the_same_data_submitted_again_is_drawn_once_and_other_data_is_drawn_again():
    # the readings' figures go to the worker as soon as the fit knows them and again with the
    # report's other figures: the same data is not drawn twice; changed data is, and the page
    # gets the PNG of the last data (not an earlier answer still on its way)
    from calib.figure_worker import same_data
    data = _data()
    again = {k: (v.copy() if isinstance(v, np.ndarray) else v) for k, v in data.items()}
    changed = dict(data, obs=data["obs"] + 1.0)
    assert same_data(data, again) and not same_data(data, changed)
    worker = FigureWorker.start()
    try:
        worker.submit("observed vs simulated", data)
        worker.submit("observed vs simulated", again)
        assert worker._asked["observed vs simulated"] == 1
        first = worker.result("observed vs simulated")
        worker.submit("observed vs simulated", changed)
        assert worker._asked["observed vs simulated"] == 2
        last = worker.result("observed vs simulated")
        assert worker._answered["observed vs simulated"] == 2
    finally:
        worker.close()
    assert first == figures.draw("observed vs simulated", data)
    assert last == figures.draw("observed vs simulated", changed) != first


def test_same_data_compares_arrays_lists_and_nan():
    from calib.figure_worker import same_data
    nan = float("nan")
    assert same_data(dict(a=np.array([1.0, nan]), b=[("x", 1.0)], c=nan),
                     dict(a=np.array([1.0, nan]), b=[("x", 1.0)], c=nan))
    assert not same_data(dict(a=np.array([1.0, 2.0])), dict(a=np.array([1.0, 2.0, 3.0])))
    assert not same_data(dict(a=np.array([1, 2])), dict(a=np.array(["1", "2"])))
    assert not same_data(dict(b=[1.0, 2.0]), dict(b=(1.0, 2.0)))
    assert not same_data(dict(a=1.0), dict(b=1.0))
    assert not same_data(None, dict())
