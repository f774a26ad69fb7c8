"""Shared fixtures of the calibration tests."""

from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

from calib import units

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


def _series_case(c_true, flows_lps, seed=3, sigma=units.PSI):
    """Two 8 in pipes in series (300 m, 250 m) fed by a 70 m reservoir, gauges at both junctions,
    flows drawn at the far one: the network, the ``TestSet`` of noisy readings, the one group, and
    the closed form beside them. ``model(c)``: gauge pressures [Pa] by the SI Hazen-Williams form
    h = 10.67 L Q^1.852 / (C^1.852 D^4.8704) (check-values.md); ``S(c)``: weighted sum of squares."""
    from calib.calibration.groups import Grouping
    from calib.calibration.tests_io import TestSet
    from calib.network.model import Network

    L1, L2, D, H = 300.0, 250.0, 8 * units.INCH, 70.0
    z = np.array([5.0, 8.0, 70.0])
    net = Network(node_ids=["J1", "J2", "R1"], n_junctions=2, elevation=z, demand=[0.0, 0.0],
                  source_head=[H], pipe_ids=["P1", "P2"], pipe_from=[2, 0], pipe_to=[0, 1],
                  length=[L1, L2], diameter=[D, D], roughness=[120.0, 120.0],
                  group=np.array(["G", "G"], dtype=object))
    flows = np.asarray(flows_lps, float) * 1e-3  # m3/s drawn at J2
    gauge = np.array([0, 1] * len(flows))
    q = np.repeat(flows, 2)

    def model(c):
        k = 10.67 / (c ** 1.852 * D ** 4.8704)  # SI Hazen-Williams, h [m], Q [m3/s], D [m]
        return (H - z[gauge] - k * L1 * q ** 1.852 - np.where(gauge == 1, k * L2 * q ** 1.852, 0.0)) \
            * units.GAMMA_WATER

    rng = np.random.default_rng(seed)
    p_obs = model(c_true) + rng.normal(0.0, sigma, size=len(q))
    n = len(q)
    tests = TestSet(folder="<closed form>", test_ids=[f"T{i}" for i in range(len(flows))],
                    flows=[{1: f} for f in flows], source_head=[{} for _ in flows],
                    day=np.zeros(len(flows), dtype=np.int64), days=[""], info=pd.DataFrame(),
                    test=np.repeat(np.arange(len(flows)), 2), node=gauge,
                    kind=np.array(["residual"] * n, dtype=object), pressure=p_obs,
                    gauge_height=np.zeros(n), sigma=np.full(n, sigma), row=np.arange(n) + 2,
                    elevation=z[gauge])
    grp = Grouping(names=["G"], index=np.array([0, 0]), rule="test")
    return SimpleNamespace(net=net, tests=tests, grp=grp, model=model, p_obs=p_obs, sigma=sigma,
                           S=lambda c: float(np.sum(((model(c) - p_obs) / sigma) ** 2)))


@pytest.fixture
def series_case():
    """Builder of the closed-form case of two pipes in series (``_series_case``), shared by the
    curve_fit cross-check (test_fit.py) and the profile-interval checks (test_intervals_scale.py)."""
    return _series_case


@pytest.fixture
def small_fitted(small):
    """The ``small`` grid's tests (C 70/100/130, seed 11) linearized at its prior: what the
    leave-one-out checks start from (test_after_fit_solves.py, test_speed_paths.py)."""
    from calib.calibration.estimate import estimate
    from calib.calibration.problem import CalibrationProblem
    from calib.calibration.synthetic import synthetic_tests

    net, grp, plan, solver = small
    tests = synthetic_tests(net, np.array([70.0, 100.0, 130.0])[grp.index], plan, seed=11)
    n = tests.n_readings
    used = np.ones(n, dtype=bool)
    prob = CalibrationProblem(net, tests, grp, solver=solver)
    est = estimate(prob, prob.x0, "linear", 2.0, 60, used)
    leverage = np.sum(est.jac[:n] * (est.jac[:n] @ est.cov), axis=1)
    return SimpleNamespace(net=net, grp=grp, solver=solver, tests=tests, used=used, est=est,
                           leverage=leverage)
