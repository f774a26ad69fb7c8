"""The fit's least squares with a structured secant estimate of the residuals' curvature
(``calibration.secant``, Dennis, Gay and Welsch 1981) against scipy.optimize.least_squares at tight
tolerances, on a published large-residual test problem and on the demo town's fit."""

import importlib

import numpy as np
import pytest
from scipy import optimize

from calib.calibration.secant import secant_least_squares

# Brown and Dennis function (More, Garbow and Hillstrom 1981, ACM TOMS 7(1), problem 16): m = 20,
# n = 4, a large-residual problem; published minimum sum of squares 85822.2 from (25, 5, -5, -1).
_T = np.arange(1, 21) / 5.0
_X0 = np.array([25.0, 5.0, -5.0, -1.0])


def _bd_residuals(x):
    return (x[0] + _T * x[1] - np.exp(_T)) ** 2 + (x[2] + x[3] * np.sin(_T) - np.cos(_T)) ** 2


def _bd_jacobian(x):
    a = 2.0 * (x[0] + _T * x[1] - np.exp(_T))
    b = 2.0 * (x[2] + x[3] * np.sin(_T) - np.cos(_T))
    return np.column_stack([a, a * _T, b, b * np.sin(_T)])


def _lsq(lower, upper, tol):
    return optimize.least_squares(_bd_residuals, _X0, jac=_bd_jacobian, bounds=(lower, upper),
                                  method="trf", x_scale="jac", xtol=tol, ftol=tol, gtol=tol,
                                  max_nfev=2000)


def test_large_residual_problem_reaches_the_published_minimum_in_far_fewer_evaluations():
    lower, upper = np.full(4, -np.inf), np.full(4, np.inf)
    sol = secant_least_squares(_bd_residuals, _bd_jacobian, _X0, lower, upper, ftol=1e-11)
    assert sol.status == 2
    assert float(sol.fun @ sol.fun) == pytest.approx(85822.2, rel=1e-6)  # More et al.'s table
    ref = _lsq(lower, upper, 1e-12)
    np.testing.assert_allclose(sol.x, ref.x, atol=1e-4)
    # Gauss-Newton converges linearly here (the residuals' curvature term is large): the secant
    # model's steps need a fraction of the evaluations trf needs even at its looser tolerance
    assert sol.nfev < _lsq(lower, upper, 1e-7).nfev / 3


def test_a_bound_is_honoured_and_reported_as_least_squares_does():
    # the published minimum has x2 = 13.2 and x4 = 0.237: x2 <= 10 and x4 <= 0.5 leave x2 on its bound
    lower = np.full(4, -np.inf)
    upper = np.array([np.inf, 10.0, np.inf, 0.5])
    sol = secant_least_squares(_bd_residuals, _bd_jacobian, _X0, lower, upper, ftol=1e-11)
    ref = _lsq(lower, upper, 1e-14)
    assert np.all(sol.x <= upper) and sol.x[1] == 10.0
    np.testing.assert_array_equal(sol.active_mask, ref.active_mask)
    np.testing.assert_allclose(sol.x, ref.x, atol=1e-4)
    assert float(sol.fun @ sol.fun) == pytest.approx(2.0 * ref.cost, rel=1e-10)


def test_the_secant_estimate_meets_its_secant_condition_on_a_quadratic_model():
    # residuals r_i = a_i + b_i x + c_i x^2 / 2 in one parameter: sum r_i Hess(r_i) = sum r_i c_i,
    # and after an accepted step the update makes S s = y# = (J+ - J)^T r+ = s (c^T r+) exactly
    a = np.array([1.0, -2.0, 3.0, 0.5])
    b = np.array([1.0, 0.5, -0.3, 2.0])
    c = np.array([0.8, -0.4, 0.6, 0.2])

    def fun(x):
        return a + b * x[0] + 0.5 * c * x[0] ** 2

    def jac(x):
        return (b + c * x[0])[:, None]

    sol = secant_least_squares(fun, jac, np.array([0.0]), np.array([-10.0]), np.array([10.0]),
                               ftol=1e-14, max_nfev=3)
    assert sol.njev == 3  # two accepted steps, the last one's update checked
    assert sol.S[0, 0] == pytest.approx(float(c @ sol.fun), rel=1e-9)


def test_demo_fit_lands_closer_to_the_tight_optimum_in_fewer_evaluations(demo_day, monkeypatch):
    # Reference: scipy.optimize.least_squares (trf) at 1e-12 from the fit's result, on the same
    # problem at the weights of the fit's last scale pass. The fit (``estimate``, its scale passes
    # with the handbook prior included) against the same fit with least_squares at ``LSQ_TOL`` in
    # the secant fit's place: closer to the reference, in fewer evaluations of the snapshots.
    estmod = importlib.import_module("calib.calibration.estimate")
    fitmod = importlib.import_module("calib.calibration.fit")
    net, tests = demo_day
    seen, passes = [], []
    real, secant = estmod.estimate, estmod.secant_least_squares

    def spy(problem, x0, *args):
        nominal = np.array(problem.sigma_h, float)
        est = real(problem, x0, *args)
        seen.append((problem, nominal, np.array(x0, float), args, est))
        return est

    def recorded(fun, jac, x, lower, upper, ftol, max_nfev, S0=None):
        sol = secant(fun, jac, x, lower, upper, ftol=ftol, max_nfev=max_nfev, S0=S0)
        passes.append((np.array(fun.__self__.sigma_h, float), sol.x))
        return sol

    def trf(fun, jac, x, lower, upper, ftol, max_nfev, S0=None):
        sol = optimize.least_squares(fun, x, jac=jac, bounds=(lower, upper), method="trf",
                                     x_scale="jac", max_nfev=max_nfev, xtol=estmod.LSQ_TOL,
                                     ftol=estmod.LSQ_TOL, gtol=estmod.LSQ_TOL)
        passes.append((np.array(fun.__self__.sigma_h, float), sol.x))
        sol.S = None
        return sol

    monkeypatch.setattr(fitmod, "estimate", spy)
    monkeypatch.setattr(estmod, "secant_least_squares", recorded)
    monkeypatch.setenv("CALIB_WORKERS", "1")
    fitmod.fit(net, tests, refit=False, influence=False)
    problem, nominal, x0, args, est = seen[0]
    assert problem.n_prior_rows and est.scaled and len(passes) > 1  # passes at new weights
    new_sigma, new_x = passes[-1]
    problem.sigma_h = nominal
    monkeypatch.setattr(estmod, "secant_least_squares", trf)
    old = real(problem, x0, *args)
    old_sigma, old_x = passes[-1]
    tol = dict(bounds=(problem.lower, problem.upper), method="trf", x_scale="jac", max_nfev=200,
               xtol=1e-12, ftol=1e-12, gtol=1e-12)
    off = []
    for sigma, x in ((new_sigma, new_x), (old_sigma, old_x)):
        problem.sigma_h = sigma
        ref = optimize.least_squares(problem.residuals, x, jac=problem.jacobian, **tol)
        off.append(np.max(np.abs(x - ref.x)))
    assert off[0] < 1e-4 < off[1]
    assert est.nfev < old.nfev


def test_a_parameter_no_residual_depends_on_stays_put_and_the_others_are_fitted():
    # a zero column of J (a group no reading sees, no prior): J^T J is singular; the other two
    # parameters reach scipy least_squares' tight minimizer and the third keeps its start
    rng = np.random.default_rng(0)
    A = rng.normal(size=(10, 3))
    A[:, 1] = 0.0
    b = rng.normal(size=10)

    def fun(x):
        return A @ x + 0.1 * (A @ x) ** 2 - b

    def jac(x):
        return A + 0.2 * (A @ x)[:, None] * A

    x0 = np.array([1.0, 2.0, 3.0])
    lo, hi = np.full(3, -10.0), np.full(3, 10.0)
    sol = secant_least_squares(fun, jac, x0, lo, hi, ftol=1e-11)
    ref = optimize.least_squares(fun, x0, jac=jac, bounds=(lo, hi), method="trf", xtol=1e-12,
                                 ftol=1e-12, gtol=1e-12)
    assert sol.status == 2 and sol.x[1] == 2.0
    np.testing.assert_allclose(sol.x[[0, 2]], ref.x[[0, 2]], atol=1e-6)
