"""Fewer evaluations of the snapshots in the fit pipeline, with the same answers.

Independent checks: a fresh problem that keeps nothing (solved from scratch, sensitivities
computed anew) and, for the Jacobian, central finite differences (the long way).
"""

import numpy as np
import pytest

from calib.calibration.estimate import _profile_end, estimate, linear_trustworthy
from calib.calibration.problem import RECENT_KEPT, CalibrationProblem
from calib.calibration.synthetic import synthetic_tests


@pytest.fixture(scope="module")
def case(small):
    """The small grid's tests at C 120 / 90 / 70: its fit, where group 0's linearized low end is
    evaluated by the check and fails it (the profile then starts there)."""
    net, grp, plan, solver = small
    tests = synthetic_tests(net, np.array([120.0, 90.0, 70.0])[grp.index], plan, seed=2)
    prob = CalibrationProblem(net, tests, grp, solver=solver)
    est = estimate(prob, prob.x0, "linear", 2.0, 60, np.ones(tests.n_readings, dtype=bool))
    return net, grp, solver, tests, prob, est


class _Counting:
    """A solver whose ``sensitivities`` calls are counted (everything else passed through)."""

    def __init__(self, solver):
        self._solver, self.n_sensitivities = solver, 0

    def sensitivities(self, *args, **kwargs):
        self.n_sensitivities += 1
        return self._solver.sensitivities(*args, **kwargs)

    def __getattr__(self, name):
        return getattr(self._solver, name)


def test_kept_sensitivities_are_weighted_again_and_match_a_fresh_problem(case):
    net, grp, solver, tests, _prob, est = case
    counting = _Counting(solver)
    prob = CalibrationProblem(net, tests, grp, solver=counting, stack=False)
    x = est.x + np.array([1.5, -2.0, 0.5])
    J1 = prob.jacobian(x)
    calls = counting.n_sensitivities
    assert calls == len(prob.pairs)
    prob.sigma_h = prob.sigma_h * 2.0  # the readings' scale moved (the fit's scale loop does this)
    J2 = prob.jacobian(x)
    assert counting.n_sensitivities == calls  # weighted again, not solved again
    assert np.array_equal(J2, J1 / 2.0)
    # against a problem that keeps nothing, and against central differences
    fresh = CalibrationProblem(net, tests, grp, solver=solver, stack=False)
    fresh.sigma_h = prob.sigma_h
    np.testing.assert_allclose(J2, fresh.jacobian(x), rtol=1e-6, atol=1e-9)
    np.testing.assert_allclose(J2, fresh.jacobian_fd(x, step=1e-6), rtol=1e-4, atol=1e-6)
    # a refit's problem on a subset of the readings over the same snapshots shares them
    keep = np.ones(tests.n_readings, dtype=bool)
    keep[np.flatnonzero(tests.kind == "residual")[0]] = False
    sub = CalibrationProblem(net, tests.subset(keep), grp, solver=counting, stack=False)
    assert not sub.shares_solutions_with(prob)
    assert sub.pairs == prob.pairs and sub.share(prob)
    assert sub.shares_solutions_with(prob) and prob.shares_solutions_with(sub)
    Js = sub.jacobian(x)
    assert counting.n_sensitivities == calls and sub.n_solves == 0
    np.testing.assert_array_equal(Js[:sub.n_readings], J1[:prob.n_readings][keep])


def test_the_last_few_solutions_are_kept_and_older_ones_solved_again(case):
    net, grp, solver, tests, _prob, est = case
    prob = CalibrationProblem(net, tests, grp, solver=solver)
    x1 = est.x.copy()
    h1 = prob.simulated_head(x1)
    per_x = prob.n_solves
    prob.simulated_head(x1 + 1.0)
    assert np.array_equal(prob.simulated_head(x1), h1) and prob.n_solves == 2 * per_x
    for k in range(RECENT_KEPT):
        prob.simulated_head(x1 + 2.0 + k)
    prob.simulated_head(x1)  # pushed out by the others: solved again, to the solver's tolerance
    assert prob.n_solves == (RECENT_KEPT + 3) * per_x
    np.testing.assert_allclose(prob.simulated_head(x1), h1, atol=1e-6)


def test_a_profile_end_starts_at_the_point_its_check_solved_and_ends_where_a_fresh_one_does(case):
    net, grp, solver, tests, prob, est = case
    cut = est.t ** 2
    kept: dict = {}
    assert not linear_trustworthy(prob, est, 0, cut, kept) and -1.0 in kept
    x_check, at_check = kept[-1.0]
    solved = []  # the x of every evaluation that had to solve
    solve = prob.solve

    def recording(x):
        key = np.asarray(x, float).tobytes()
        if key not in prob._recent.items:
            solved.append(key)
        return solve(x)

    prob.solve = recording
    try:
        for k in range(RECENT_KEPT):  # other points in between: the check's solution is handed on
            prob.residuals(est.x + 0.1 * (k + 1))
        solved.clear()
        prob.recall(x_check, at_check)
        end, reaches, points = _profile_end(prob, est, 0, -1.0, cut)
    finally:
        del prob.solve
    assert x_check.tobytes() not in solved and points >= 1 and not reaches
    # the same end as a search on a problem that keeps nothing (solved anew at every point)
    fresh = CalibrationProblem(net, tests, grp, solver=solver)
    fresh.sigma_h = prob.sigma_h
    ref, _reaches, _points = _profile_end(fresh, est, 0, -1.0, cut)
    assert end == pytest.approx(ref, abs=1e-4 * est.t * est.sd[0])


def test_the_fits_solver_tolerances_give_the_answers_of_a_tight_solver(demo_day):
    # the fit's own solver stops on an energy residual of 1e-6 m (FIT_TOLERANCES), which leaves
    # the returned heads within a few 1e-6 m of the solution. Reference: the same fit of the
    # demo town (every phase: fit, the refit without its gross error, interval checks,
    # leave-one-out) with a solver at heads to 1e-8 m (100 times the default's accuracy), flows
    # to 1e-9 and mass to 1e-10 of the demand (10 and 100 times); tighter, SuperLU's rounding
    # beside a reducing valve keeps one snapshot's last flow changes above the tolerance, and the
    # reference would not converge without CHOLMOD
    from calib.calibration import fit
    from calib.calibration.fit import FIT_TOLERANCES
    from calib.hydraulics import NetworkSolver

    net, tests = demo_day
    assert FIT_TOLERANCES["head_tol"] > NetworkSolver(net).head_tol
    ours = fit(net, tests)
    tight = NetworkSolver(net, headloss="hazen-williams", head_tol=1e-8, energy_tol=1e-8,
                          flow_tol=1e-9, mass_tol=1e-10)
    ref = fit(net, tests, solver=tight)
    assert ours.first is not None and any(ours.influence)  # the refit and leave-one-out ran
    assert ours.flag == ref.flag and ours.influence == ref.influence
    for a, b in ((ours.estimate.x, ref.estimate.x), (ours.estimate.low, ref.estimate.low),
                 (ours.estimate.high, ref.estimate.high), (ours.simulated, ref.simulated)):
        np.testing.assert_allclose(a, b, rtol=0, atol=1e-6 * max(1.0, float(np.max(np.abs(b)))))
