"""Less work after the fit (interval checks, refits, report data), with the same answers.

Independent checks: scipy.optimize.least_squares refits at tight tolerances on a fresh problem
(the profile's conditional minimum the long way).
"""

import numpy as np
import pytest
from scipy import optimize

from calib.calibration.estimate import (PROFILE_ROOT_TOL, _profile_end, _profile_point, estimate,
                                        refine_intervals)
from calib.calibration.problem import CalibrationProblem
from calib.calibration.synthetic import synthetic_tests


@pytest.fixture(scope="module")
def open_high(small):
    """The small grid's tests at C 150 / 90 / 70: group 0's profile reaches the C bound 160 on
    its high side (the tests give it a lower limit only)."""
    net, grp, plan, solver = small
    tests = synthetic_tests(net, np.array([150.0, 90.0, 70.0])[grp.index], plan, seed=2)
    prob = CalibrationProblem(net, tests, grp, solver=solver)
    est = estimate(prob, prob.x0, "linear", 2.0, 60, np.ones(tests.n_readings, dtype=bool))
    return net, grp, solver, tests, prob, est


def _tight_rise(net, grp, solver, tests, est, i, value):
    """Rise of the weighted sum of squares with parameter ``i`` held at ``value`` and the others
    refitted by scipy's least_squares to 1e-12, on a problem that keeps nothing."""
    fresh = CalibrationProblem(net, tests, grp, solver=solver)
    free = np.flatnonzero(np.arange(len(est.x)) != i)

    def full(z):
        x = np.array(est.x, float)
        x[i], x[free] = value, z
        return x

    sol = optimize.least_squares(lambda z: fresh.residuals(full(z)), est.x[free],
                                 bounds=(fresh.lower[free], fresh.upper[free]), method="trf",
                                 xtol=1e-12, ftol=1e-12, gtol=1e-12)
    r = fresh.residuals(full(sol.x))
    return float(r @ r) - float(est.residual @ est.residual)


def test_a_profile_end_at_the_c_bound_is_decided_without_a_jacobian_there(open_high):
    net, grp, solver, tests, prob, est = open_high
    assert not est.scaled  # the weights are the stated sigma's: a fresh problem has the same
    cut = est.t ** 2
    asked = []  # the x of every Jacobian the search asks for
    jacobian = prob.jacobian

    def recording(x):
        asked.append(np.array(x, float))
        return jacobian(x)

    prob.jacobian = recording
    try:
        end, reaches, points = _profile_end(prob, est, 0, 1.0, cut)
    finally:
        del prob.jacobian
    assert (end, reaches) == (160.0, True) and points >= 1
    assert not any(x[0] == 160.0 for x in asked)  # there: its residuals only
    # the long way: the other C refitted tightly at 160, the rise stays below the cut-off by more
    # than the end search's tolerance (so the full point could not have ended the search there)
    rise = _tight_rise(net, grp, solver, tests, est, 0, 160.0)
    assert rise < (np.sqrt(cut) * (1.0 - PROFILE_ROOT_TOL)) ** 2
    # and the point as the search evaluates it in full (Gauss-Newton step or refit) agrees
    full_rise = _profile_point(prob, est, 0, 160.0, est.x)[0]
    assert full_rise == pytest.approx(rise, abs=1e-3 * cut)


def test_the_intervals_are_those_of_a_search_that_takes_every_jacobian(open_high, monkeypatch):
    _net, _grp, _solver, _tests, prob, est = open_high
    import copy

    from calib.calibration import estimate as estimate_module
    ours = refine_intervals(prob, copy.deepcopy(est), prob.c_cols)
    monkeypatch.setattr(estimate_module, "_below_cut_at_start", lambda *a, **k: False)
    every = refine_intervals(prob, copy.deepcopy(est), prob.c_cols)
    assert ours.high_open[0] and ours.high[0] == 160.0
    for name in ("low", "high", "low_open", "high_open"):
        np.testing.assert_array_equal(getattr(ours, name), getattr(every, name))
    assert ours.method == every.method


def test_an_end_one_newton_step_away_is_taken_without_evaluating_that_step(small, monkeypatch):
    # the small grid's tests at C 70 / 100 / 130, seed 5: all three groups profiled. Against the
    # search that evaluates every Newton step (PROFILE_NEWTON_TOL 0: as before), fewer points and
    # the same ends to rounding; against the long way's profile (scipy least_squares refits to
    # 1e-12, the end by scipy.optimize.brentq) within the search's own accuracy
    import copy

    from calib.calibration import estimate as estimate_module
    net, grp, plan, solver = small
    tests = synthetic_tests(net, np.array([70.0, 100.0, 130.0])[grp.index], plan, seed=5)
    prob = CalibrationProblem(net, tests, grp, solver=solver)
    est = estimate(prob, prob.x0, "linear", 2.0, 60, np.ones(tests.n_readings, dtype=bool))
    ours = refine_intervals(prob, copy.deepcopy(est), prob.c_cols)
    monkeypatch.setattr(estimate_module, "PROFILE_NEWTON_TOL", 0.0)
    every = refine_intervals(prob, copy.deepcopy(est), prob.c_cols)
    assert ours.method == every.method == ["profile likelihood"] * 3
    assert ours.n_profile_fits < every.n_profile_fits  # measured: 13 points against 17
    np.testing.assert_allclose(ours.low, every.low, rtol=0, atol=1e-9)
    np.testing.assert_allclose(ours.high, every.high, rtol=0, atol=1e-9)
    cut = est.t ** 2
    checked = 0
    for i in range(3):
        half = est.t * est.sd[i]
        for end, bound, is_open in ((ours.low[i], 40.0, ours.low_open[i]),
                                    (ours.high[i], 160.0, ours.high_open[i])):
            if is_open:
                continue
            a, b = sorted((est.x[i], bound))
            ref = optimize.brentq(
                lambda c: _tight_rise(net, grp, solver, tests, est, i, c) - cut, a, b, xtol=1e-6)
            # the search's tolerance is 0.1 % of the root; its Gauss-Newton points add as much
            assert abs(end - ref) <= 2e-3 * half, (i, end, ref)
            checked += 1
    assert checked >= 3


def test_a_column_ruled_out_on_its_face_runs_its_ends_as_two_tasks(open_high, monkeypatch):
    # group 0's linearized interval reaches past the C bound 160 (no evaluation needed to rule it
    # out): its two ends are two tasks, each from the problem's state, with the ends a search of
    # that end alone finds (bit for bit); the low end against the long way's profile (scipy
    # least_squares refits to 1e-12): its root within the search's tolerance of the cut-off's
    import copy

    from calib.calibration import estimate as estimate_module
    from calib.calibration.tasks import on_problem
    net, grp, solver, tests, prob, est = open_high
    assert estimate_module._linear_ruled_out(prob, est, 0)
    seen = []

    def spy(problem, task, items, *args, **kwargs):
        seen.append(list(items))
        return on_problem(problem, task, items, *args, **kwargs)

    monkeypatch.setattr(estimate_module, "on_problem", spy)
    ours = refine_intervals(prob, copy.deepcopy(est), prob.c_cols)
    assert (0, -1.0) in seen[0] and (0, 1.0) in seen[0] and (0, None) not in seen[0]
    cut = est.t ** 2
    alone = on_problem(prob, lambda end: _profile_end(prob, est, 0, end, cut), [-1.0, 1.0])
    assert (ours.low[0], ours.low_open[0]) == alone[0][:2]
    assert (ours.high[0], ours.high_open[0]) == alone[1][:2] == (160.0, True)
    rise = _tight_rise(net, grp, solver, tests, est, 0, ours.low[0])
    assert abs(np.sqrt(rise) / np.sqrt(cut) - 1.0) <= 2 * PROFILE_ROOT_TOL


def test_a_leave_one_out_refit_ends_at_a_small_gauss_newton_step(small_fitted, monkeypatch):
    # against scipy.optimize.least_squares from the fit's x at 1e-12 (the long way): each C within
    # twice the step tolerance (the step taken is within it; what it leaves is about rho/(1-rho)
    # of it, rho the ratio of successive steps); against the refit that evaluates until
    # least_squares' own tolerance stops it (LOO_STEP_TOL 0: as before), fewer solves
    import importlib
    fitmod = importlib.import_module("calib.calibration.fit")  # the module; the package exports fit()
    case = small_fitted
    net, grp, solver, tests, used, est = (case.net, case.grp, case.solver, case.tests, case.used,
                                          case.est)
    h = case.leverage
    tol = fitmod.LOO_STEP_TOL * np.minimum(est.sd, 1.0)
    ended_early = 0
    for row in np.argsort(-h)[:3]:
        mask = used.copy()
        mask[row] = False

        def refit(step_tol):
            monkeypatch.setattr(fitmod, "LOO_STEP_TOL", step_tol)
            p = CalibrationProblem(net, tests.subset(mask), grp, solver=solver)
            return fitmod.loo_refit(est, p, int(row)), p.n_solves

        (fast, n_fast), (_plain, n_plain) = refit(0.02), refit(0.0)
        ref_prob = CalibrationProblem(net, tests.subset(mask), grp, solver=solver)
        ref = optimize.least_squares(ref_prob.residuals, est.x, jac=ref_prob.jacobian,
                                     bounds=(ref_prob.lower, ref_prob.upper), method="trf",
                                     x_scale="jac", max_nfev=100, xtol=1e-12, ftol=1e-12, gtol=1e-12)
        assert fast.status > 0 and ref.status > 0
        assert np.all(np.abs(fast.x - ref.x) <= 2.0 * tol)
        assert n_fast <= n_plain
        ended_early += fast.status == 3 and n_fast < n_plain
    assert ended_early >= 1
