"""``fit``'s ``on_readings``: the readings' simulated values, standardized residuals and flags,
handed on before the interval checks (so that ``calib fit``'s figure worker draws the readings'
two figures beside them), are the values of the returned ``FitResult``, and moving them earlier
changes nothing the fit returns.

Why it holds: the interval checks change no ``est.x``, ``s2`` or ``used``, and the problem of every
reading reads the kept solutions at the result, solving nothing. Where it would solve (a test
whose every reading is left out, so it has snapshots the fit does not), it still comes after the
checks: a case with such a test checks that branch.
"""

import numpy as np

from calib import parallel, units
from calib.calibration import fit
from calib.calibration.synthetic import synthetic_tests

TRUTH = np.array([120.0, 90.0, 70.0])


def _run(net, tests, **kw):
    """The fit with every stage seen, the ``on_readings`` calls with the stages seen before each."""
    stages, calls = [], []

    def progress(n, stage):
        if not stages or stages[-1] != stage:
            stages.append(stage)

    def on_readings(readings):
        calls.append((readings, list(stages)))

    result = fit(net, tests, progress=progress, on_readings=on_readings, **kw)
    return result, stages, calls


def _same_as_result(readings, result):
    assert readings.tests is result.tests
    assert np.array_equal(readings.simulated, result.simulated)
    assert np.array_equal(readings.z, result.z, equal_nan=True)
    assert readings.flag == list(result.flag)
    assert readings.threshold == result.options["threshold"]


def test_readings_come_before_the_interval_checks_with_the_results_values(demo_day):
    net, tests = demo_day
    result, stages, calls = _run(net, tests)
    assert len(calls) == 1
    readings, before = calls[0]
    checks = [s for s in stages if s.startswith("interval checks")]
    assert checks and not any(s.startswith("interval checks") for s in before)  # the demo checks
    assert any(result.flag)  # the demo day flags a reading: the flags are handed on too
    _same_as_result(readings, result)
    # the same fit without the hook: the same numbers, bit for bit
    plain = fit(net, tests)
    assert np.array_equal(plain.c, result.c) and np.array_equal(plain.c_low, result.c_low)
    assert np.array_equal(plain.c_high, result.c_high) and plain.flag == result.flag
    assert plain.influence == result.influence and plain.n_solves == result.n_solves


def test_a_test_left_out_whole_hands_its_readings_on_after_the_checks(small):
    # every reading of test 3 fails a face check (static grade above the source, residual above
    # static): the fit's problem has no snapshot of test 3, the problem of every reading has, and
    # solves it; that solve stays after the interval checks, as before
    net, grp, plan, solver = small
    tests = synthetic_tests(net, TRUTH[grp.index], plan, seed=23, solver=solver)
    mine = np.flatnonzero(tests.test == 3)
    static = mine[tests.kind[mine] == "static"]
    tests.pressure[static] += 40 * units.PSI
    for i in mine[tests.kind[mine] == "residual"]:
        s = static[tests.node[static] == tests.node[i]][0]
        tests.pressure[i] = tests.pressure[s] + 1 * units.PSI
    fitted, ran = [], []

    def on_fitted(f):  # the caller's work with the fitted C: after the checks on this branch
        fitted.append(f)
        return [parallel.Job(lambda k: ran.append(k) or k, range(3))]

    result, stages, calls = _run(net, tests, grouping=grp, prior="none", solver=solver,
                                 on_fitted=on_fitted)
    assert len(fitted) == 1 and sorted(ran) == [0, 1, 2]  # its jobs ran, once each
    f = fitted[0]
    assert np.array_equal(f.c, result.c) and f.flag == list(result.flag)
    assert f.solutions.keys() == result.solutions.keys()
    assert not result.estimate.used[mine].any()
    assert len(calls) == 1
    readings, before = calls[0]
    if any(s.startswith("interval checks") for s in stages):
        assert any(s.startswith("interval checks") for s in before)
    assert "simulate every reading" in stages  # test 3's snapshots were solved for it
    _same_as_result(readings, result)
