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


def _dense_curve(net, flows, gauge, heads=None, n=97, rough=None):
    """Reference: the gauge's pressure at ``n`` flows evenly spaced on the N^1.85 axis up to 1.6
    times the test's, each solved to heads within 1e-9 m (scales, pressures)."""
    tight = NetworkSolver(net, head_tol=1e-9)
    scales = np.linspace(0.0, 1.6 ** 1.85, n) ** (1 / 1.85)
    p = [tight.solve(Snapshot(extra_demand={k: q * s for k, q in flows.items()},
                              source_head=heads or {}), roughness=rough).pressure[gauge]
         for s in scales]
    return scales, np.array(p)


def _line_miss(scales, p, dense_scales, dense_p):
    """Largest distance between the line drawn through the points (straight on the N^1.85 axis,
    as matplotlib draws it there: common practice) and the dense reference curve."""
    return float(np.max(np.abs(np.interp(dense_scales ** 1.85, scales ** 1.85, p) - dense_p)))


@pytest.mark.parametrize("node, gpm, gauge", [(30, 1200, 31), (20, 900, 21), (10, 1500, 40)])
def test_curve_points_draw_the_curve_within_its_tolerance(grid, node, gpm, gauge):
    # reference: a dense curve of tight cold solves; the drawn line (its points chosen from the
    # Hermite interpolant of the points and their slopes) stays within CURVE_TOLERANCE of the drop
    net, _ = grid
    flows = {str(net.node_ids[node]): gpm * units.GPM}
    scales, p = _curve(NetworkSolver(net), net.roughness, flows, {}, gauge)
    assert scales[0] == 0.0 and scales[-1] == 1.6 and 1.0 in scales
    assert len(scales) <= 33
    ds, dp = _dense_curve(net, flows, gauge)
    tol = CURVE_TOLERANCE * abs(dp[0] - dp[-1])
    assert _line_miss(scales, p, ds, dp) <= tol
    # the check has teeth: the straight line from no flow to 1.6 times the test's misses by more
    ends = np.array([0.0, 1.6])
    assert _line_miss(ends, np.interp(ends ** 1.85, ds ** 1.85, dp), ds, dp) > tol


def test_curve_slope_is_the_derivative_of_the_gauge_pressure(grid, demo_day):
    # reference: central differences of tight solves at s +/- 1e-4 (the demo town's reducing
    # valves included: their active state enters the implicit differentiation)
    from calib.calibration.report import _slope
    net, _ = grid
    demo, tests = demo_day
    cases = [(net, {str(net.node_ids[30]): 1200 * units.GPM}, {}, 31, 0.7)]
    for k in range(tests.n_tests):
        if tests.flows[k] and (tests.test == k).any():
            flows = {str(demo.node_ids[n]): q for n, q in tests.flows[k].items()}
            heads = {str(demo.node_ids[s]): h for s, h in tests.source_head[k].items()}
            cases.append((demo, flows, heads, int(tests.node[tests.test == k][0]), 1.0))
    checked = 0
    for network, flows, heads, gauge, s in cases:
        # flows to 1e-9 of the reference flow: with SuperLU (no CHOLMOD) the demo town's links
        # at its reducing valves keep moving by about 1e-10 m3/s from round-off, so a tighter
        # flow_tol never stops there; the central difference's error from that is ~1e-7 of fd
        tight = NetworkSolver(network, head_tol=1e-10, flow_tol=1e-9)

        def at(v):
            return tight.solve(Snapshot(extra_demand={k: q * v for k, q in flows.items()},
                                        source_head=heads))

        column = np.zeros((tight.nj, 1))
        for n, q in flows.items():
            column[network.node_index[n], 0] -= q
        h = 1e-4
        fd = (at(s + h).pressure[gauge] - at(s - h).pressure[gauge]) / (2 * h)
        assert _slope(tight, at(s), column, gauge)[0] == pytest.approx(fd, rel=1e-4, abs=1e-3)
        checked += 1
    assert checked >= 5


def test_curve_reuses_the_fits_solution_of_the_same_loading(grid):
    net, _ = grid
    solver = NetworkSolver(net)
    flows = {str(net.node_ids[20]): 900 * units.GPM}
    tested = solver.solve(Snapshot(extra_demand=dict(flows), label="T1 residual"))
    at_rest = solver.solve(Snapshot(label="T1 static"))
    calls = []
    counting = NetworkSolver(net)
    counting.solve = lambda *a, **k: calls.append(a) or NetworkSolver.solve(counting, *a, **k)
    scales, p = _curve(counting, net.roughness, flows, {}, 21, known=[at_rest, tested],
                       start=tested)
    assert p[list(scales).index(1.0)] == tested.pressure[21]
    assert p[0] == at_rest.pressure[21]
    assert len(calls) == len(scales) - 2  # the two known points are not solved again


@pytest.fixture(scope="module")
def demo_result(demo_day):
    from calib.calibration import fit
    net, tests = demo_day
    return fit(net, tests, influence=False)


def test_curve_slope_at_the_fits_own_solutions(demo_result):
    # the curve takes its no-flow and tested points from the fit's converged solutions (solved by
    # the fit's solver, stacked on the demo town): their slopes are those of fresh tight solves
    # of the same loadings
    from calib.calibration.report import CURVE_SOLVER, _slope
    net, t = demo_result.network, demo_result.tests
    solver = NetworkSolver(net, **CURVE_SOLVER)
    tight = NetworkSolver(net, head_tol=1e-10)
    checked = 0
    for k in range(t.n_tests):
        flows = {str(net.node_ids[n]): q for n, q in t.flows[k].items()}
        heads = {str(net.node_ids[s]): h for s, h in t.source_head[k].items()}
        column = np.zeros((net.n_junctions, 1))
        for n, q in flows.items():
            column[net.node_index[n], 0] -= q
        gauge = int(t.node[t.test == k][0])
        for kind, s in (("residual", 1.0), ("static", 0.0)):
            known = demo_result.solutions.get(f"{t.test_ids[k]} {kind}")
            if known is None or not flows:
                continue
            fresh = tight.solve(Snapshot(extra_demand={n: q * s for n, q in flows.items()},
                                         source_head=heads), roughness=demo_result.roughness())
            assert _slope(solver, known, column, gauge)[0] == pytest.approx(
                _slope(solver, fresh, column, gauge)[0], rel=1e-5)
            checked += 1
    assert checked >= 20


def test_demo_curves_drawn_within_the_tolerance_of_dense_curves(demo_result, monkeypatch):
    # every hydrant-curve panel of the demo town's report against a dense curve of tight solves
    # at the fitted C. Measured 0.16-1.09 of CURVE_TOLERANCE with the midpoints of every segment
    # solved (the former rule, 96 points) and 0.12-1.09 with the Hermite rule (57 points); the
    # largest is T11's curve, where a reducing valve turns active between two points (a kink no
    # smooth interpolant sees): a little over the tolerance in both, hence the 1.25.
    from calib.calibration import report
    result = demo_result
    net, tests = result.network, result.tests
    monkeypatch.setenv("CALIB_WORKERS", "1")
    data = report._curves_data(result, "us")
    rough = result.roughness()
    seen = 0
    for k, panel in enumerate(data["panels"]):
        if panel is None:
            continue
        flows = {str(net.node_ids[n]): q for n, q in tests.flows[k].items()}
        heads = {str(net.node_ids[s]): h for s, h in tests.source_head[k].items()}
        sel = np.flatnonzero(tests.test == k)
        gauge, gh = int(tests.node[sel[0]]), units.head_to_pressure(tests.gauge_height[sel[0]])
        total = sum(flows.values())
        scales = panel["flow"] * units.unit_factor(data["fu"], "flow") / total
        p = panel["pressure"] * units.unit_factor(data["pu"], "pressure") + gh
        ds, dp = _dense_curve(net, flows, gauge, heads, n=49, rough=rough)
        tol = CURVE_TOLERANCE * abs(dp[0] - dp[-1])
        assert _line_miss(scales, p, ds, dp) <= 1.25 * tol, tests.test_ids[k]
        seen += 1
    assert seen >= 10


def test_case_deletion_step_is_exact_with_the_readings_scale_in_the_weights():
    # the fit stores J and r with the readings' rows at s * sigma and the covariance of that J; the
    # one-step deletion estimate must use it as stored (reference: numpy.linalg.lstsq with and
    # without the row; exact in linear least squares, Cook and Weisberg 1982, sec. 3.4)
    from calib.calibration.fit import _case_deletion_step

    rng = np.random.default_rng(5)
    J0 = rng.normal(size=(20, 3))
    y = J0 @ np.array([2.0, 1.0, -1.0]) + rng.normal(0, 0.3, 20)
    x = np.linalg.lstsq(J0, y, rcond=None)[0]
    s = 0.6  # the readings' scale found from their scatter
    est = _linear_estimate(J0 / s, (J0 @ x - y) / s)
    est.s2 = s ** 2
    for row in (2, 11):
        keep = np.arange(20) != row
        x_loo = np.linalg.lstsq(J0[keep], y[keep], rcond=None)[0]
        np.testing.assert_allclose(x + _case_deletion_step(est, row, "linear"), x_loo, rtol=1e-9)


def test_extrapolated_start_takes_the_rest_of_steadily_shrinking_steps():
    # closed form: r = [x, (k x^2 / 2 - m)] has its least-squares minimum at x = 0 (k m < 1), where
    # the Hessian 1 - k m is smaller than J^T J = 1: Gauss-Newton steps shrink by about k m each
    # (a linearly converging sequence; Aitken's extrapolation takes the rest at once)
    from calib.calibration.fit import _extrapolated_start

    k, m = 1.0, 0.5
    res = lambda x: np.array([x[0], 0.5 * k * x[0] ** 2 - m])  # noqa: E731
    jac = lambda x: np.array([[1.0], [k * x[0]]])  # noqa: E731
    gn = lambda x: np.linalg.lstsq(jac(x), -res(x), rcond=None)[0]  # noqa: E731
    problem = SimpleNamespace(residuals=res, jacobian=jac, lower=np.array([-10.0]),
                              upper=np.array([10.0]))
    x0 = np.array([0.4])
    x1 = x0 + gn(x0)
    plain = x1 + gn(x1)
    start = _extrapolated_start(problem, x1, x1 - x0)
    assert abs(start[0]) < 0.1 * abs(plain[0])  # the optimum is 0
    # no steady shrinking (a linear problem: one step reaches the optimum): the start stays
    lin = SimpleNamespace(residuals=lambda x: np.array([x[0] - 1.0, x[0] - 1.0]),
                          jacobian=lambda x: np.array([[1.0], [1.0]]), lower=problem.lower,
                          upper=problem.upper)
    assert _extrapolated_start(lin, np.array([1.0]), np.array([0.5]))[0] == 1.0


def test_leave_one_out_refit_agrees_with_a_long_refit_from_the_fit(small_fitted):
    # the fit's shortcut (one-step start, extrapolated) against the plain way: least_squares from
    # the fit's solution with tight tolerances and many evaluations (reference: scipy.optimize)
    from scipy import optimize

    from calib.calibration.fit import _loo_start, loo_refit
    from calib.calibration.problem import CalibrationProblem

    case = small_fitted
    net, grp, solver, tests, used, est = (case.net, case.grp, case.solver, case.tests, case.used,
                                          case.est)
    h = case.leverage
    for row in np.argsort(-h)[:2]:
        mask = used.copy()
        mask[row] = False
        fast_prob = CalibrationProblem(net, tests.subset(mask), grp, solver=solver)
        fast = loo_refit(est, fast_prob, int(row))
        slow_prob = CalibrationProblem(net, tests.subset(mask), grp, solver=solver)
        slow = optimize.least_squares(slow_prob.residuals, est.x, jac=slow_prob.jacobian,
                                      bounds=(slow_prob.lower, slow_prob.upper), method="trf",
                                      x_scale="jac", max_nfev=100, xtol=1e-12, ftol=1e-12,
                                      gtol=1e-12)
        assert fast.status > 0 and slow.status > 0  # both converged (not stopped at max_nfev)
        np.testing.assert_allclose(fast.x, slow.x, atol=0.01 * float(np.min(est.sd)))
        assert np.all(np.abs(fast.x - est.x) > 0.0)
        start = _loo_start(est, fast_prob, int(row), "linear")
        assert np.linalg.norm(start - slow.x) < 0.5 * np.linalg.norm(est.x - slow.x)
        assert fast_prob.n_solves <= slow_prob.n_solves


def test_simulated_readings_reuse_the_fits_solutions_and_match_fresh_solves(small):
    # the result's simulated pressures come from the solutions the fit already has at its x (no
    # solve in that phase); reference: a fresh problem solved cold at the same x, to the solver's
    # head tolerance (1e-6 m, calib.hydraulics) in pressure
    from calib.calibration import fit
    from calib.calibration.problem import CalibrationProblem
    from calib.calibration.synthetic import synthetic_tests
    from calib.hydraulics import NetworkSolver

    net, grp, plan, solver = small
    tests = synthetic_tests(net, np.array([70.0, 100.0, 130.0])[grp.index], plan, seed=12)
    stages = []
    res = fit(net, tests, grouping=grp, prior="none", solver=solver, refit=False, influence=False,
              progress=lambda n, stage: stages.append(stage))
    assert "simulate every reading" not in stages
    assert "interval checks (profile likelihood where needed)" in stages  # the cache moved there
    fresh = CalibrationProblem(net, tests, grp, solver=NetworkSolver(net))
    h = fresh.simulated_head(res.estimate.x)
    p = units.head_to_pressure(h - tests.elevation - tests.gauge_height)
    np.testing.assert_allclose(res.simulated, p, atol=units.head_to_pressure(1e-5))


def test_leave_one_out_refit_keeps_the_fits_weights_with_a_prior(demo_day, monkeypatch):
    # case deletion leaves one reading out and keeps every other weight as the fit had it (Cook
    # and Weisberg 1982, sec. 3.4): with the handbook prior and the scale from the readings'
    # scatter (the demo town's day states no gauge accuracy), the readings' rows at s * sigma.
    # Reference: scipy.optimize.least_squares from the fit's x with tight tolerances on the same
    # readings at those weights.
    import importlib

    from scipy import optimize

    from calib.calibration import make_groups
    from calib.calibration.problem import CalibrationProblem
    from calib.hydraulics import NetworkSolver

    fitmod = importlib.import_module("calib.calibration.fit")  # the module; the package exports fit()
    net, tests = demo_day
    grp = make_groups(net)
    seen = []
    real = fitmod.loo_refit

    def spy(est, problem, row, *args, **kwargs):
        out = real(est, problem, row, *args, **kwargs)
        seen.append((est, problem, out))
        return out

    monkeypatch.setattr(fitmod, "loo_refit", spy)
    monkeypatch.setenv("CALIB_WORKERS", "1")  # every refit seen here: a worker's spy is its own
    res = fitmod.fit(net, tests, grouping=grp)
    assert seen and res.estimate.scaled and abs(res.estimate.s2 - 1.0) > 0.1
    solver = NetworkSolver(net)
    for est, problem, out in seen:
        kept = CalibrationProblem(net, problem.tests, grp, prior=problem.prior, solver=solver)
        kept.sigma_h = kept.sigma_h * np.sqrt(est.s2)
        tight = dict(bounds=(kept.lower, kept.upper), method="trf", x_scale="jac", max_nfev=100,
                     xtol=1e-12, ftol=1e-12, gtol=1e-12)
        ref = optimize.least_squares(kept.residuals, est.x, jac=kept.jacobian, **tight)
        cols = kept.c_cols
        np.testing.assert_allclose(out.x[cols], ref.x[cols], atol=0.01 * float(np.min(est.sd[cols])))
        # at the nominal 1 psi the prior counts 1/s^2 times more and the refit lands elsewhere,
        # so the check above can tell the two apart
        nominal = CalibrationProblem(net, problem.tests, grp, prior=problem.prior, solver=solver)
        other = optimize.least_squares(nominal.residuals, est.x, jac=nominal.jacobian, **tight)
        assert np.max(np.abs(other.x[cols] - ref.x[cols])) > 0.05 * float(np.min(est.sd[cols]))
