"""The on-site model check: advice rules (common practice) and the check against the network solve."""

import threading

import pytest

from calib.calibration import predict_test
from calib.flowtest import pitot_discharge
from calib.units import FT, GAMMA_WATER, INCH, PSI

from mobile.services import check
from mobile.services.area import Area
from mobile.services.session import TestService

P = PSI


@pytest.mark.parametrize("obs, pred, expect", [
    ((80 * P, 60 * P), (80 * P, 61 * P), None),  # within 5 psi: agrees
    ((88 * P, 68 * P), (80 * P, 60 * P), "gauge height"),  # both off by the same: elevation/height
    ((80 * P, 45 * P), (80 * P, 60 * P), "closed"),  # far bigger drop: a closed valve?
    ((80 * P, 72 * P), (80 * P, 60 * P), "pitot"),  # far smaller drop: pitot or outlet size
    ((86 * P, 65 * P), (80 * P, 62 * P), "static"),  # static alone off (drop agrees)
])
def test_advice_rules(obs, pred, expect):
    advice = check.advise(*obs, *pred)
    if expect is None:
        assert advice == []
    else:
        assert advice and expect in " ".join(advice)


def _readings_from_model(service, area, offset=0.0, height_ft=0.0):
    """A test whose gauge readings are what the model predicts (+ offset), read with the gauge
    ``height_ft`` above the node (it then reads gamma * height less; 60 F water, calib.units)."""
    h = area.hydrants
    tid = service.new_test(crew="X")
    service.set_gauges(tid, [h[0]])
    service.add_outlet(tid, h[5], "2.5")
    service.set_gauge_height(tid, f"{height_ft}")
    q = pitot_discharge(20 * PSI, 2.5 * INCH, 0.90)
    p, = predict_test(area.network, flows={h[5]: q}, gauges=[h[0]])
    lift = GAMMA_WATER * height_ft * FT
    fmt = lambda v: f"{(v - lift) / PSI + offset:.4f}"  # noqa: E731
    assert service.enter(tid, f"static@{h[0]}", fmt(p.static)).ok
    assert service.enter(tid, f"residual@{h[0]}", fmt(p.residual)).ok
    assert service.enter(tid, "pitot@o1", "20").ok
    return tid


def test_readings_equal_to_the_model_agree_even_with_a_gauge_height(service, area):
    tid = _readings_from_model(service, area, height_ft=3.0)
    result = check.check_test(service, tid)
    assert result.ok and not result.gauges[0].suspect
    g = result.gauges[0]
    assert g.observed_static == pytest.approx(g.predicted_static, abs=0.001 * PSI)


def test_a_planted_offset_is_called_a_gauge_height_problem(service, area):
    tid = _readings_from_model(service, area, offset=10.0)
    result = check.check_test(service, tid)
    assert result.ok and result.gauges[0].suspect
    assert "gauge height" in result.gauges[0].advice[0]


def test_check_runs_in_a_worker_thread(service, area):
    tid = _readings_from_model(service, area)
    done, seen = threading.Event(), {}

    def on_done(result):
        seen["result"], seen["thread"] = result, threading.current_thread()
        done.set()

    thread = check.run_in_background(service, tid, on_done)
    assert thread is not None
    assert done.wait(60)
    assert seen["thread"] is not threading.main_thread()
    assert seen["result"].ok


def test_without_a_network_the_check_says_so(store):
    service = TestService(store, Area("Hydrants only", hydrants=["A1", "A2"]))
    tid = service.new_test(crew="X")
    result = check.check_test(service, tid)
    assert not result.ok and "No network" in result.message


def test_noted_source_grade_moves_the_prediction_by_the_same_head(service, area):
    """One fixed-grade source and fixed demands: raising its grade by dh raises every head by dh
    (closed form: flows do not change), so every predicted pressure rises by gamma * dh."""
    tid = _readings_from_model(service, area)
    before = check.check_test(service, tid).gauges[0]
    source = service.sources()[0]
    grade = area.network.source_head[0] / FT + 20.0
    assert service.set_source_grade(tid, source, f"{grade:.6f}").ok
    after = check.check_test(service, tid).gauges[0]
    rise = GAMMA_WATER * 20.0 * FT
    assert after.predicted_static - before.predicted_static == pytest.approx(rise, rel=1e-6)
    assert after.predicted_residual - before.predicted_residual == pytest.approx(rise, rel=1e-6)
    assert after.suspect and "gauge height" in after.advice[0]  # 8.7 psi below on both readings


def test_check_rows_show_each_gauge_with_its_advice(service, area):
    """The screen's text carries the node, both pressures and the advice (common practice)."""
    from mobile.services import views

    tid = _readings_from_model(service, area, offset=10.0)
    result = check.check_test(service, tid)
    rows = views.check_rows(result, "us")
    g = result.gauges[0]
    assert len(rows) == 1 and rows[0].startswith(f"{g.node}:")
    assert f"{g.predicted_static / PSI:.1f} psi model" in rows[0]
    assert all(a in rows[0] for a in g.advice) and g.advice
