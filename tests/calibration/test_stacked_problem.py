"""The calibration problem with its snapshots solved in stacks (calib.hydraulics.stacked): the same
residuals, Jacobian and fit as snapshot by snapshot, far fewer solver calls."""

import numpy as np
import pytest

from calib import units
from calib.calibration import fit
from calib.calibration import problem as problem_module
from calib.calibration.groups import make_groups
from calib.calibration.problem import CalibrationProblem, stack_size
from calib.calibration.synthetic import grid_network, plan_tests, synthetic_tests
from calib.errors import CalibrationError
from calib.hydraulics import NetworkSolver

TRUTH = np.array([120.0, 90.0, 70.0])


@pytest.fixture(scope="module")
def two_days():
    """A 6 x 5 grid, 3 groups, 6 tests over two test days (a demand factor each)."""
    net = grid_network(6, 5, n_groups=3, seed=4)
    grp = make_groups(net)
    tests = synthetic_tests(net, TRUTH[grp.index], plan_tests(net, 6, seed=1), seed=2)
    tests.days = ["2026-05-14", "2026-05-15"]
    tests.day = np.array([0, 0, 0, 1, 1, 1])
    return net, grp, tests


def _problem(two_days, stack):
    net, grp, tests = two_days
    return CalibrationProblem(net, tests, grp, demand_factor=True, source_offsets=True,
                              solver=NetworkSolver(net), stack=stack)


def _x(prob):
    x = prob.x0.copy()
    x[prob.c_cols] = [105.0, 95.0, 75.0]
    x[prob.kind == "demand"] = [1.2, 0.8]
    x[prob.kind == "offset"] = np.linspace(-2, 2, int((prob.kind == "offset").sum()))
    return x


def test_stacks_hold_the_snapshots_of_one_demand_factor(two_days):
    # a stack's copies share one demand factor (it scales every base demand of the stack)
    net, grp, tests = two_days
    prob = _problem(two_days, True)
    assert len(prob.stacks) == 2 and sum(map(len, prob.stacks)) == len(prob.pairs)
    for members in prob.stacks:
        assert len({int(tests.day[prob.pairs[i][0]]) for i in members}) == 1
    assert _problem(two_days, False).stacks == []


def test_stacked_residuals_and_jacobian_match_one_by_one_and_finite_differences(two_days):
    # the same problem with and without stacks, at parameters off the truth; the Jacobian also against
    # central differences (common practice; tolerance from the 1e-6 relative step)
    one, stacked = _problem(two_days, False), _problem(two_days, True)
    x = _x(one)
    for step in (1.0, 0.98, 0.97):  # a cold start, then warm starts from the stack's last solution
        np.testing.assert_allclose(stacked.residuals(x * step), one.residuals(x * step), atol=1e-6, rtol=0)
        J1, J2 = one.jacobian(x * step), stacked.jacobian(x * step)
        np.testing.assert_allclose(J2, J1, atol=1e-8 * np.abs(J1).max(), rtol=1e-6)
    # counts: every snapshot solved each time, but by one solver call per stack
    assert stacked.n_solves == one.n_solves == 3 * len(one.pairs)
    assert stacked.n_solver_calls == 3 * len(stacked.stacks) < one.n_solver_calls / 2
    Jfd = stacked.jacobian_fd(x, step=1e-6)
    J = stacked.jacobian(x)
    scale = np.max(np.abs(Jfd), axis=0)
    assert np.all(scale > 0)
    np.testing.assert_allclose(J, Jfd, atol=1e-5 * scale.max(), rtol=1e-4)


def test_fit_is_the_same_with_and_without_stacks(small, monkeypatch):
    # a whole fit (estimate, flags, profile intervals, leave-one-out) on the 50-pipe grid: the printed
    # C and interval ends (0.1) and the flags are the same; the parameters agree to 1e-4 of their
    # standard deviation. (A fit resolves C only to the residuals' numerical noise: with SuperLU's
    # round-off the one-by-one fit stops 2.4e-4 in C, 1.5e-5 sd, from the stacked one, both within
    # 3e-4 of a fit with a 1e5 times tighter solver and stop, where least_squares at LSQ_TOL stopped
    # 4e-3 away; common practice: a fit's numerical error is judged against its statistical one.)
    net, grp, plan, solver = small
    tests = synthetic_tests(net, TRUTH[grp.index], plan, seed=21, solver=solver)
    tests.pressure[3] += 8 * units.PSI  # a gross error, so that the refit and flags run
    stacked = fit(net, tests, grouping=grp, prior="none", solver=NetworkSolver(net))
    monkeypatch.setattr(problem_module, "STACK_MAX_NETWORK_PIPES", 0)
    one = fit(net, tests, grouping=grp, prior="none", solver=NetworkSolver(net))
    np.testing.assert_array_less(np.abs(stacked.c - one.c), 1e-4 * one.c_sd)
    np.testing.assert_array_equal(np.round(stacked.c_low, 1), np.round(one.c_low, 1))
    np.testing.assert_array_equal(np.round(stacked.c_high, 1), np.round(one.c_high, 1))
    assert stacked.flag == one.flag and any(stacked.flag)


def test_a_failed_stacked_solve_falls_back_to_one_by_one_errors(two_days):
    # one Newton iteration is not enough: the stacked solve fails, the one-by-one path runs and its
    # error names the snapshot (test and kind) and the parameters, in the network's own ids
    net, grp, tests = two_days
    prob = CalibrationProblem(net, tests, grp, solver=NetworkSolver(net, max_iterations=1), stack=True)
    assert prob.stacks
    with pytest.raises(CalibrationError, match=r"snapshot '\S+ (static|residual)'") as err:
        prob.residuals(prob.x0)
    assert "@" not in str(err.value)


def test_stack_size_by_network_size():
    # measured crossover (benchmarks/README.md, "A stacked snapshots"): stacks of at most 8,000 pipes
    # over their copies, none on networks above 2,000 pipes
    assert stack_size(grid_network(6, 5)) == 8000 // grid_network(6, 5).n_pipes
    big = grid_network(40, 40)
    assert big.n_pipes > 2000 and stack_size(big) == 1
    assert stack_size(big, limit=10 * big.n_pipes) == 10
