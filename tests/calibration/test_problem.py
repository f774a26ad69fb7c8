"""The least-squares problem: analytic Jacobian against finite differences, and closed-form properties."""

import numpy as np
import pytest

from calib import units
from calib.calibration.groups import make_groups
from calib.calibration.priors import GroupPrior
from calib.calibration.problem import CalibrationProblem
from calib.calibration.synthetic import grid_network, plan_tests, synthetic_tests


@pytest.fixture(scope="module")
def case():
    net = grid_network(6, 5, n_groups=3, seed=4)
    grp = make_groups(net)
    truth = np.array([120.0, 90.0, 70.0])[grp.index]
    tests = synthetic_tests(net, truth, plan_tests(net, 5, seed=1), seed=2)
    tests.days = ["2026-05-14", "2026-05-15"]
    tests.day = np.array([0, 0, 1, 1, 1])
    return net, grp, tests


def test_analytic_jacobian_matches_central_differences(case):
    # cross-check of the implicit differentiation (Todini-Pilati system) against central differences
    # (common practice; tolerance from the difference step, 1e-6 relative)
    net, grp, tests = case
    prior = GroupPrior(c=np.array([110.0, 100.0, 80.0]), spread=np.array([15.0, 15.0, 15.0]), source="test")
    prob = CalibrationProblem(net, tests, grp, prior=prior, demand_factor=True, source_offsets=True)
    x = prob.x0.copy()
    x[: grp.n_groups] = [105.0, 95.0, 75.0]
    x[prob.kind == "demand"] = [1.2, 0.8]
    x[prob.kind == "offset"] = np.linspace(-2, 2, int((prob.kind == "offset").sum()))
    J = prob.jacobian(x)
    Jfd = prob.jacobian_fd(x, step=1e-6)
    assert J.shape == (tests.n_readings + 3, 3 + 2 + 5)
    scale = np.max(np.abs(Jfd), axis=0)
    assert np.all(scale > 0)  # every parameter moves some reading
    np.testing.assert_allclose(J, Jfd, atol=1e-5 * scale.max(), rtol=1e-4)


def test_scaling_every_c_scales_head_losses_by_k_to_minus_1_852(case):
    # check-values.md, exact property [C]: one fixed-grade source, fixed demands: C -> k C leaves flows
    # unchanged and multiplies every head loss by k^-1.852 (k = 1.1: 0.8381867)
    net, grp, tests = case
    x = np.array([100.0, 100.0, 100.0])
    grp_net = net.replace(roughness=np.full(net.n_pipes, 100.0))
    prob = CalibrationProblem(grp_net, tests, grp, prior=None)
    loss1 = net.source_head[0] - prob.simulated_head(x)
    loss2 = net.source_head[0] - prob.simulated_head(1.1 * x)
    np.testing.assert_allclose(loss2 / loss1, 0.8381867, rtol=1e-5)


def test_residual_rows_are_grade_differences_over_sigma(case):
    net, grp, tests = case
    prob = CalibrationProblem(net, tests, grp, prior=None)
    x = np.array([120.0, 90.0, 70.0])
    r = prob.residuals(x)
    h_sim = prob.simulated_head(x)
    np.testing.assert_allclose(r, (h_sim - tests.hgl) / (units.PSI / units.GAMMA_WATER))
