"""The shortcuts that make a fit and its report fast give what the long way gives: the one-step
leave-one-out screen, and the report's hydrant curves drawn from few, warm-started points."""

from types import SimpleNamespace

import numpy as np
import pytest

from calib import units
from calib.calibration.estimate import covariance
from calib.calibration.fit import _loo_screen
from calib.calibration.report import CURVE_TOLERANCE, _curve
from calib.calibration.synthetic import grid_network
from calib.hydraulics import NetworkSolver, Snapshot


def _linear_estimate(J, r, at_bound=None):
    cov, und = covariance(J)
    p = J.shape[1]
    return SimpleNamespace(jac=J, residual=r, cov=cov, s2=1.0, sd=np.sqrt(np.diag(cov)),
                           at_bound=np.zeros(p, bool) if at_bound is None else at_bound,
                           undetermined=und)


def test_loo_screen_is_exact_for_linear_least_squares():
    # case deletion in linear least squares (Cook and Weisberg 1982): the one-step shift is the
    # exact one; reference numpy.linalg.lstsq with and without the row
    rng = np.random.default_rng(3)
    J = rng.normal(size=(25, 3))
    y = J @ np.array([1.0, -2.0, 0.5]) + rng.normal(0, 0.1, 25)
    x = np.linalg.lstsq(J, y, rcond=None)[0]
    r = J @ x - y  # residual as the fit defines it: simulated minus observed, weighted
    est = _linear_estimate(J, r)
    problem = SimpleNamespace(c_cols=np.array([0, 2]))
    for row in (0, 7, 24):
        keep = np.arange(25) != row
        x_loo = np.linalg.lstsq(J[keep], y[keep], rcond=None)[0]
        exact = np.max(np.abs(x_loo - x)[[0, 2]] / est.sd[[0, 2]])
        assert _loo_screen(est, problem, row, "linear") == pytest.approx(exact, rel=1e-9)


def test_loo_screen_refits_where_it_does_not_apply():
    rng = np.random.default_rng(4)
    J = rng.normal(size=(12, 2))
    est = _linear_estimate(J, rng.normal(size=12))
    problem = SimpleNamespace(c_cols=np.array([0, 1]))
    assert np.isfinite(_loo_screen(est, problem, 3, "linear"))
    assert _loo_screen(est, problem, 3, "soft_l1") == np.inf  # robust loss: weights change
    est_b = _linear_estimate(J, est.residual, at_bound=np.array([True, False]))
    assert _loo_screen(est_b, problem, 3, "linear") == np.inf  # a bound may stop the move


@pytest.fixture(scope="module")
def grid():
    net = grid_network(8, 7, n_groups=2, seed=2, demand=0.1e-3)
    return net, NetworkSolver(net)


def test_curve_points_draw_the_curve_within_its_tolerance(grid):
    # reference: cold solves of the same loadings at flows between the points (common practice:
    # the plotted line is straight between points on the N^1.85 axis)
    net, solver = grid
    flows = {str(net.node_ids[30]): 1200 * units.GPM}
    gauge = 31
    scales, p = _curve(solver, net.roughness, flows, {}, gauge)
    assert scales[0] == 0.0 and scales[-1] == 1.6 and 1.0 in scales
    assert len(scales) <= 33
    u = scales ** 1.85
    tol = CURVE_TOLERANCE * abs(p[0] - p[-1])
    for s in np.linspace(0.05, 1.55, 9):
        cold = NetworkSolver(net).solve(Snapshot(extra_demand={k: q * s for k, q in flows.items()}))
        drawn = np.interp(s ** 1.85, u, p)
        assert abs(drawn - cold.pressure[gauge]) <= 2.0 * tol + 1e-6


def test_curve_reuses_the_fits_solution_of_the_same_loading(grid):
    net, solver = grid
    flows = {str(net.node_ids[20]): 900 * units.GPM}
    tested = solver.solve(Snapshot(extra_demand=dict(flows), label="T1 residual"))
    at_rest = solver.solve(Snapshot(label="T1 static"))
    calls = []
    counting = SimpleNamespace(solve=lambda *a, **k: calls.append(a) or solver.solve(*a, **k))
    scales, p = _curve(counting, net.roughness, flows, {}, 21, known=[at_rest, tested],
                       start=tested)
    assert p[list(scales).index(1.0)] == tested.pressure[21]
    assert p[0] == at_rest.pressure[21]
    assert len(calls) == len(scales) - 2  # the two known points are not solved again
