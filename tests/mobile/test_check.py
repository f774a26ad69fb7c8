"""The on-site model check: advice rules (common practice) and the check against the network solve."""

import re
import threading

import pytest

from calib.calibration import predict_test
from calib.flowtest import pitot_discharge
from calib.loop.check import ACTIONS_IN_REASON
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


def _readings_from_model(service, area, offset=0.0, height_ft=0.0, note_grade=True):
    """A test whose gauge readings are what the model predicts (+ offset), read with the gauge
    ``height_ft`` above the node (it then reads gamma * height less; 60 F water, calib.units).
    ``note_grade``: the crew notes the source's grade (the model's), as the check's tank level."""
    h = area.hydrants
    tid = service.new_test(crew="X")
    if note_grade:
        assert service.set_source_grade(tid, service.sources()[0],
                                        f"{area.network.source_head[0] / FT:.6f}").ok
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
    p, = predict_test(area.network, flows={area.hydrants[5]: pitot_discharge(20 * PSI, 2.5 * INCH, 0.90)},
                      gauges=[area.hydrants[0]])
    assert g.observed_static == pytest.approx(p.static, abs=0.001 * PSI)  # the gauge height taken out
    assert g.notes and all(n.startswith("consistent") for n in g.notes)
    lo, hi = g.ranges["residual"]
    assert lo < g.observed_residual < hi


def test_an_offset_a_tank_level_could_explain_is_not_suspect_when_no_level_is_noted(service, area):
    """10 psi on both readings is 23 ft of grade: inside the stated sd of 10 ft for a source whose
    grade was not noted (3.29 sd), so no reading is suspect - the check says what it assumed."""
    tid = _readings_from_model(service, area, offset=10.0, note_grade=False)
    result = check.check_test(service, tid)
    assert result.ok and not result.gauges[0].suspect


def test_a_planted_offset_is_called_a_gauge_height_problem(service, area):
    tid = _readings_from_model(service, area, offset=10.0)
    result = check.check_test(service, tid)
    assert result.ok and result.gauges[0].suspect
    assert "gauge height" in result.gauges[0].advice[0]


def test_a_suspect_readings_advice_says_each_action_once(service, area):
    """The reason says the first actions "before leaving"; the lines after it add only the next
    one, so a crew reads no instruction twice (common practice: short, ordered field advice)."""
    tid = _readings_from_model(service, area, offset=10.0)
    g = check.check_test(service, tid).gauges[0]
    assert g.suspect
    then = [line[len("Then: "):].rstrip(".") for line in g.advice if line.startswith("Then: ")]
    reasons = [line for line in g.advice if not line.startswith("Then: ")]
    before = {a for line in reasons for a in re.split(r"; then ", line.split("Before leaving: ")[1])}
    assert then and len(then) <= check.MAX_ACTIONS - ACTIONS_IN_REASON, g.advice
    assert not before & set(then), g.advice


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


def test_the_app_judges_the_demo_day_as_the_command_line_does():
    """The app's worker job and ``python -m calib check`` share calib.loop.check: the demo's test with the
    planted reading (truth.json: T13), with the tests before it as the day's earlier tests, flags the
    planted residual and only it, and lists the pipes whose closing would best explain the test beside it."""
    import json
    from pathlib import Path

    import numpy as np

    from calib.calibration import read_tests
    from calib.network.io import read_network
    demo = Path(__file__).resolve().parents[2] / "field_samples" / "tallowmere"
    net = read_network(demo / "network")
    ts = read_tests(demo / "tests", net)
    ids = net.node_ids

    def one(t):
        sel = np.flatnonzero(ts.test == t)
        observed = {}
        for j in sel:
            at_node = ts.pressure[j] + GAMMA_WATER * ts.gauge_height[j]
            observed.setdefault(str(ids[ts.node[j]]), {})[ts.kind[j]] = at_node
        return ({str(ids[n]): q for n, q in ts.flows[t].items()},
                {g: (v["static"], v["residual"]) for g, v in observed.items()},
                {str(ids[s]): h for s, h in ts.source_head[t].items()})

    planted = json.loads((demo / "tests" / "truth.json").read_text())["planted"]
    k = ts.test_ids.index(planted["test_id"])
    flows, observed, grades = one(k)
    job = check.CheckJob(net, flows, list(observed), observed, "us", check.TOLERANCE, grades,
                         earlier=[one(t) for t in range(k)])
    result = check.run_job(job)
    assert result.ok and f"{k} earlier test(s)" in result.message
    bad = [g for g in result.gauges if g.suspect]
    assert [g.node for g in bad] == [planted["node"]]
    assert f"residual at {planted['node']} misread" in " ".join(bad[0].advice)
    assert len(bad[0].closures) == 3 and bad[0].closures[0].startswith("P")


def test_the_days_earlier_tests_feed_the_check(service, area):
    first = _readings_from_model(service, area)
    second = _readings_from_model(service, area)
    assert check.prepare(service, first).earlier == []
    job = check.prepare(service, second)
    assert len(job.earlier) == 1 and set(job.earlier[0][1]) == {area.hydrants[0]}
    assert "1 earlier test(s)" in check.run_job(job).message


def test_closures_for_a_test_in_the_app(service, area):
    """A residual 9 psi below the model (a bigger drop, as a closed valve gives): the service ranks
    pipes best first, each lowering the test's misfit."""
    tid = _readings_from_model(service, area)
    g = area.hydrants[0]
    low = service.readings(tid)[f"residual@{g}"].si_value / PSI - 9.0
    assert service.enter(tid, f"residual@{g}", f"{low:.2f}").ok
    ranked = check.closures_for(service, tid, top=3)
    assert 1 <= len(ranked) <= 3
    assert all(c.misfit_after < c.misfit_before for c in ranked)
    assert [c.misfit_after for c in ranked] == sorted(c.misfit_after for c in ranked)
