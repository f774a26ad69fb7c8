"""Profile points far from their conditional minimum: Gauss-Newton iterations instead of a refit.

Outside references: the profile likelihood's definition (Venzon and Moolgavkar 1988, Applied
Statistics 37(1): the interval end is where the sum of squares minimized over the other
parameters with this one held fixed has risen by the cut-off), computed the long way with
scipy.optimize.least_squares at tolerances 1e-12 on a problem that keeps nothing, and its
crossing of the cut-off by scipy.optimize.brentq; for the fallback to the refit, a made-up closed
form whose Gauss-Newton step overshoots, against scipy.optimize.least_squares at 1e-12.
"""

from types import SimpleNamespace

import numpy as np
import pytest
from scipy import optimize

from calib.calibration import estimate as E
from calib.calibration.problem import CalibrationProblem
from calib.calibration.synthetic import synthetic_tests
from calib.hydraulics import NetworkSolver


@pytest.fixture(scope="module")
def three_groups(small):
    """The small grid's tests at C 70 / 100 / 130 (every group needs the profile), the fit, and
    a fresh problem (new solver, nothing kept) at the fit's weights, for counting evaluations."""
    net, grp, plan, solver = small
    tests = synthetic_tests(net, np.array([70.0, 100.0, 130.0])[grp.index], plan, seed=2)
    prob = CalibrationProblem(net, tests, grp, solver=solver)
    est = E.estimate(prob, prob.x0, "linear", 2.0, 60, np.ones(tests.n_readings, dtype=bool))

    def fresh():
        p = CalibrationProblem(net, tests, grp, solver=NetworkSolver(net))
        p.sigma_h = prob.sigma_h
        return p
    return est, fresh


def _tight_rise(fresh, est, i, value):
    """The profile's rise at parameter ``i`` held at ``value``: the others refitted by
    scipy.optimize.least_squares (trf) to 1e-12 from the optimum."""
    p = fresh()
    free = np.flatnonzero(np.arange(len(est.x)) != i)

    def embed(z):
        x = est.x.copy()
        x[free], x[i] = z, value
        return x
    sol = optimize.least_squares(lambda z: p.residuals(embed(z)), est.x[free],
                                 jac=lambda z: p.jacobian(embed(z))[:, free],
                                 bounds=(p.lower[free], p.upper[free]), method="trf",
                                 x_scale="jac", xtol=1e-12, ftol=1e-12, gtol=1e-12)
    return float(sol.fun @ sol.fun) - float(est.residual @ est.residual)


def _evaluations(p, call):
    """``call(p)`` and the evaluations of the snapshots it took (solves / snapshots)."""
    n = p.n_solves
    out = call(p)
    return out, (p.n_solves - n) / len(p.pairs)


@pytest.mark.parametrize("side", [-1.0, 1.0])
def test_a_point_far_from_its_minimum_takes_fewer_evaluations_than_a_refit(three_groups, side,
                                                                           monkeypatch):
    # group 2 held half its linearized half-width out, the others left at the optimum: the start's
    # Gauss-Newton step lowers the sum of squares by more than PROFILE_STEP_SHARE of the cut-off,
    # so a least-squares refit decided (PROFILE_GN_ITERATIONS = 1 is that path); Gauss-Newton
    # iterations get there in fewer evaluations, the root of the rise within the end search's
    # tolerance of the long way's
    est, fresh = three_groups
    i, cut = 2, est.t ** 2
    value = est.x[i] + side * 0.5 * est.t * est.sd[i]
    ref = _tight_rise(fresh, est, i, value)
    (rise, x_at, _slope, _trace, drop), n_iter = _evaluations(
        fresh(), lambda p: E._profile_point(p, est, i, value, est.x))
    monkeypatch.setattr(E, "PROFILE_GN_ITERATIONS", 1)
    (rise_1, _x, _s, _t, drop_1), n_refit = _evaluations(
        fresh(), lambda p: E._profile_point(p, est, i, value, est.x))
    assert drop_1 == 0.0  # the refit ran: the start needed more than one small step
    assert n_iter < n_refit, (n_iter, n_refit)
    assert drop <= E.PROFILE_END_SHARE * cut  # an iterate converged as tightly as an end needs
    assert x_at[i] == value
    tol = E.PROFILE_ROOT_TOL * np.sqrt(cut)
    assert abs(np.sqrt(rise) - np.sqrt(ref)) <= tol, (rise, ref)
    assert abs(np.sqrt(rise_1) - np.sqrt(ref)) <= tol, (rise_1, ref)


def test_profile_ends_agree_with_the_tight_profile_in_fewer_evaluations(three_groups, monkeypatch):
    # the ends the search finds inside the bounds, against brentq on the long way's profile: within
    # the search's tolerance (PROFILE_ROOT_TOL of the cut-off's root: about that share of the
    # distance from the optimum), and in fewer evaluations than the same search with the refits
    # (PROFILE_GN_ITERATIONS = 1)
    est, fresh = three_groups
    cut = est.t ** 2
    ends = [(i, d) for i in range(3) for d in (-1.0, 1.0)]

    def search():
        p = fresh()
        found = [_evaluations(p, lambda q: E._profile_end(q, est, i, d, cut)) for i, d in ends]
        return [f[0] for f in found], sum(f[1] for f in found)
    found, n_iter = search()
    with monkeypatch.context() as m:
        m.setattr(E, "PROFILE_GN_ITERATIONS", 1)
        found_refit, n_refit = search()
    assert n_iter < n_refit, (n_iter, n_refit)
    checked = 0
    for (i, d), (end, reaches, _points), (end_1, _r1, _p1) in zip(ends, found, found_refit):
        bound = 160.0 if d > 0 else 40.0
        if reaches:
            assert end == bound and _tight_rise(fresh, est, i, bound) < cut
            continue
        a, b = sorted((est.x[i], bound))
        ref = optimize.brentq(lambda c: _tight_rise(fresh, est, i, c) - cut, a, b, xtol=1e-7)
        tol = E.PROFILE_ROOT_TOL * abs(ref - est.x[i])
        assert abs(end - ref) <= tol, (i, d, end, ref)
        # and no farther from it than the search with the refits (to a tenth of the tolerance)
        assert abs(end - ref) <= abs(end_1 - ref) + 0.1 * tol, (i, d, end, end_1, ref)
        checked += 1
    assert checked >= 3


class _Curved:
    """Two parameters, the first held: residuals ``[exp(x1) - 20 - x0, 0.01 (x1 - 2)]`` (a made-up
    closed form whose Gauss-Newton step from x1 = 0 overshoots to about 19: the sum of squares
    rises there). Counts its evaluations."""

    lower, upper = np.array([-5.0, -5.0]), np.array([30.0, 30.0])

    def __init__(self):
        self.calls = 0

    def residuals(self, x):
        self.calls += 1
        return np.array([np.exp(x[1]) - 20.0 - x[0], 0.01 * (x[1] - 2.0)])

    def jacobian(self, x):
        return np.array([[-1.0, np.exp(x[1])], [0.0, 0.01]])


def test_a_step_that_raises_the_sum_of_squares_falls_back_to_the_refit():
    # the closed form above: the iterate at x1 = 19 raises the sum of squares, so the least-squares
    # refit decides from the start; the point's minimum against scipy's least_squares at 1e-12
    p = _Curved()
    est = SimpleNamespace(residual=np.zeros(2), t=1.96)
    rise, x_at, _slope, _trace, drop = E._profile_point(p, est, 0, 0.5, np.array([0.5, 0.0]))
    sol = optimize.least_squares(lambda z: p.residuals(np.array([0.5, z[0]])), [0.0],
                                 jac=lambda z: p.jacobian(np.array([0.5, z[0]]))[:, 1:],
                                 xtol=1e-12, ftol=1e-12, gtol=1e-12)
    assert drop == 0.0  # the refit's point
    assert x_at[0] == 0.5
    assert x_at[1] == pytest.approx(sol.x[0], abs=1e-3)
    assert rise == pytest.approx(float(sol.fun @ sol.fun), rel=1e-3)
