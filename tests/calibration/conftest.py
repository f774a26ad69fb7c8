"""Shared fixtures of the calibration tests."""

import pytest

from calib.calibration.groups import make_groups
from calib.calibration.synthetic import grid_network, plan_tests
from calib.hydraulics import NetworkSolver


@pytest.fixture(scope="module")
def small():
    """A 6 x 5 grid (50 pipes), 3 groups, 9 tests spread over the districts."""
    net = grid_network(6, 5, n_groups=3, seed=4)
    grp = make_groups(net)
    plan = plan_tests(net, 9, seed=1, flow_gpm=(1000.0, 1500.0))
    return net, grp, plan, NetworkSolver(net)
