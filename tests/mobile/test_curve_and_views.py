"""The hydrant curve image and the display text the screens show."""

import numpy as np
import pytest

from calib import flowtest
from calib.units import PSI

from mobile.services import curve, views


def _test(service):
    h = service.area.hydrants
    tid = service.new_test(crew="X")
    service.set_gauges(tid, [h[0]])
    service.add_outlet(tid, h[1], "2.5")
    service.enter(tid, f"static@{h[0]}", "72")
    service.enter(tid, f"residual@{h[0]}", "58")
    service.enter(tid, "pitot@o1", "22")
    return tid


def test_curve_is_straight_on_the_n185_scale(service):
    """NFPA 291's N^1.85 graph: the supply curve is a straight line when flow is raised to 1.85
    (exact for the 1/0.54 exponent up to 1.852 vs 1.85, within drawing accuracy)."""
    r = service.results(_test(service))
    q, p = r.curve
    x = flowtest.n185(q)
    slope = np.polyfit(x, p, 1)
    assert np.max(np.abs(np.polyval(slope, x) - p)) < 0.01 * (r.static - r.target)


def test_curve_png_is_written(service, tmp_path):
    tid = _test(service)
    path = tmp_path / "c.png"
    assert curve.render_curve(service.results(tid), path)
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG spec, ISO 15948)


def test_no_curve_until_the_readings_are_in(service, tmp_path):
    tid = service.new_test(crew="X")
    assert not curve.render_curve(service.results(tid), tmp_path / "c.png")
    assert not (tmp_path / "c.png").exists()


def test_results_view_shows_the_figures(service):
    v = views.results_view(service, _test(service))
    assert v["flow"] == "787 gpm" and v["rated"] == "1,599 gpm"  # check-values: 787.02, 1598.53
    assert v["klass"] == "Class AA"
    assert set(views.EMPTY_RESULTS) <= set(v)


def test_history_lists_every_reading_as_typed(service):
    tid = _test(service)
    service.store.finish(tid)
    service.correct(tid, "gauge re-read")
    service.enter(tid, f"residual@{service.area.hydrants[0]}", "57.5")
    text = views.history_text(service, tid)
    assert "(revision 2)" in text and "gauge re-read" in text
    assert "@" not in text  # plain words, not slot codes
    h0 = service.area.hydrants[0]
    assert f"Residual at {h0}: 58.0 psi\n" in text and f"Residual at {h0}: 57.5 psi" in text
    service.set_units("si")  # a reading typed in another unit than shown says how it was typed
    assert "(typed as 58 psi)" in views.history_text(service, tid)


def test_keypad_goes_to_the_first_empty_reading_and_stays_on_a_chosen_one(service):
    """Common practice: readings are taken in order (static, residual, pitot); the app offers the
    next one still to enter, but keeps a reading the crew picked."""
    h = service.area.hydrants
    tid = service.new_test(crew="X")
    service.set_gauges(tid, [h[0]])
    service.add_outlet(tid, h[1], "2.5")
    service.enter(tid, f"static@{h[0]}", "72")
    rows = views.reading_rows(service, tid)
    assert [r["value"] for r in rows] == ["72.0 psi", "-", "-", "-"]  # last: static after closing
    assert views.pick_slot(rows, "") == f"residual@{h[0]}"
    assert views.pick_slot(rows, "pitot@o1") == "pitot@o1"
    assert views.pick_slot(rows, "pitot@o9") == f"residual@{h[0]}"  # a removed outlet
    assert views.pick_slot([], "pitot@o1") == ""
    assert views.pick_slot(rows, "static@" + h[0], advance=True) == f"residual@{h[0]}"
    service.enter(tid, f"residual@{h[0]}", "58")
    service.enter(tid, "pitot@o1", "22")
    full = views.reading_rows(service, tid)
    # every needed reading entered: on to the static after closing (optional), then stay
    assert views.pick_slot(full, "pitot@o1", advance=True) == f"static_end@{h[0]}"
    service.enter(tid, f"static_end@{h[0]}", "71.5")
    full = views.reading_rows(service, tid)
    assert views.pick_slot(full, "pitot@o1", advance=True) == "pitot@o1"


def test_the_curve_image_is_renamed_when_what_it_draws_changes(service, tmp_path):
    """Common practice for caches: the name follows the content. Same test, same name; another
    rating gauge (the first one removed), another reading or other units, another name."""
    h = service.area.hydrants
    tid = _test(service)  # gauge h[0]: 72 / 58 psi
    first = curve.cache_path(service.results(tid), tmp_path, tid)
    assert curve.cache_path(service.results(tid), tmp_path, tid) == first
    assert curve.cache_path(service.results(tid), tmp_path, tid, "si") != first
    service.add_gauge(tid, h[2])
    service.enter(tid, f"static@{h[2]}", "70")
    service.enter(tid, f"residual@{h[2]}", "50")
    assert curve.cache_path(service.results(tid), tmp_path, tid) == first  # h[0] still rates
    service.remove_gauge(tid, h[0])  # no new reading: the history length stays, the curve changes
    assert service.results(tid).static == pytest.approx(70 * PSI, rel=1e-9)  # now h[2] rates
    assert curve.cache_path(service.results(tid), tmp_path, tid) != first
