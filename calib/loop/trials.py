"""Generated days with a known truth, for the checks of ``check``, ``closures`` and ``plan``.

Invented data only (``calib.calibration.synthetic``'s grid town): an older town whose unlined cast
iron is 70-100 years old, true C drawn from the handbook prior of each group, the office model at a
flat C of 120 (the guess an office makes before any test), a day of tests read with 1 psi of gauge
noise rounded to 0.5 psi, and one reading planted wrong.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from calib import units
from calib.calibration import synthetic
from calib.calibration.groups import make_groups
from calib.calibration.priors import group_prior

TEST_YEAR = 2026.0
#: group -> (material, install year) of the older town's three districts
DISTRICTS = {"G1": ("cast iron", 1928.0), "G2": ("cast iron", 1952.0), "G3": ("ductile iron", 1978.0)}


@dataclass
class Day:
    network: object  # the office model (C 120 everywhere)
    tests: object  # TestSet
    true_c: np.ndarray  # per group
    planted: int  # reading index planted wrong (-1 for none)
    grouping: object


def older_town(nx: int = 10, ny: int = 8, seed: int = 0):
    """The grid town of ``synthetic.grid_network`` with the older districts of ``DISTRICTS``."""
    net = synthetic.grid_network(nx, ny, n_groups=3, seed=seed, source_head=80.0)
    material = np.array([DISTRICTS[g][0] for g in net.group], dtype=object)
    installed = np.array([DISTRICTS[g][1] for g in net.group], float)
    return net.replace(material=material, installed=installed)


def older_town_day(seed: int = 0, n_tests: int = 10, planted_psi: float = 8.0, nx: int = 10, ny: int = 8,
                   flow_gpm=(700.0, 1100.0)) -> Day:
    """A generated day on ``older_town``: true C ~ handbook prior, one residual reading off by ``planted_psi``."""
    rng = np.random.default_rng(seed)
    net = older_town(nx, ny, seed=seed)
    grouping = make_groups(net)
    prior = group_prior(net, grouping, TEST_YEAR)
    true_c = np.clip(rng.normal(prior.c, prior.spread), 40.0, 150.0)
    truth = grouping.per_pipe(true_c, net.roughness)
    plan = synthetic.plan_tests(net, n_tests, seed=seed, flow_gpm=flow_gpm, n_gauges=2)
    tests = synthetic.synthetic_tests(net, truth, plan, sigma=units.PSI, seed=seed + 1,
                                      round_to=0.5 * units.PSI)
    planted = -1
    if planted_psi:
        cand = np.flatnonzero((tests.kind == "residual") & (tests.test >= 3))
        planted = int(rng.choice(cand))
        tests.pressure[planted] += planted_psi * units.PSI
    return Day(net, tests, true_c, planted, grouping)


@dataclass
class ClosureTrial:
    network: object  # the model: every pipe open
    tests: object  # the day's readings, made with ``closed`` shut
    closed: int  # pipe index closed in the "true" network
    test: int  # the test that shows it most (largest misfit)
    misfit: float  # that test's weighted sum of squares with the model


def closure_trial(seed: int, n_tests: int = 8, nx: int = 10, ny: int = 8, min_misfit: float = 30.0,
                  tries: int = 20):
    """A generated day on ``older_town`` with one pipe closed in the truth and open in the model.

    The model's C is the truth's (a calibrated model), so the closure is the only difference; the
    closed pipe is drawn at random among pipes inside the grid until one test's misfit exceeds
    ``min_misfit`` (a closure no test sees cannot be found by any method). Returns a
    ``ClosureTrial`` or None when ``tries`` draws found none.
    """
    rng = np.random.default_rng(10_000 + seed)
    net = older_town(nx, ny, seed=seed)
    grouping = make_groups(net)
    prior = group_prior(net, grouping, TEST_YEAR)
    true_c = np.clip(rng.normal(prior.c, prior.spread), 40.0, 150.0)
    model = net.replace(roughness=grouping.per_pipe(true_c, net.roughness))
    plan = synthetic.plan_tests(model, n_tests, seed=seed, flow_gpm=(700.0, 1100.0), n_gauges=3)
    inner = np.flatnonzero(model.pipe_to < model.n_junctions)[:-1]
    return _closed_pipe_day(model, plan, inner, rng, seed, min_misfit, tries)


def demo_closure_trial(seed: int, min_misfit: float = 30.0, tries: int = 20):
    """The demo town's day (its tests' flows and gauges) with one open pipe closed in the truth.

    The model is Tallowmere at the demo truth's C (``truth.json``), every pipe open as in the network
    files; the readings are solved with one drawn pipe closed, 1 psi of gauge noise, read to 0.5 psi.
    Returns a ``ClosureTrial`` or None, as ``closure_trial``.
    """
    import json
    from pathlib import Path

    from calib.calibration import read_tests
    from calib.network.io import read_network
    demo = Path(__file__).resolve().parents[2] / "field_samples" / "tallowmere"
    net = read_network(demo / "network")
    grouping = make_groups(net)
    truth = json.loads((demo / "tests" / "truth.json").read_text())["c_factor"]
    model = net.replace(roughness=grouping.per_pipe(np.array([truth[g] for g in grouping.names]),
                                                    net.roughness))
    day = read_tests(demo / "tests", net)
    plan = []
    for t in range(day.n_tests):
        nodes = day.node[day.test == t]
        plan.append((dict(day.flows[t]), list(dict.fromkeys(int(n) for n in nodes))))
    rng = np.random.default_rng(20_000 + seed)
    inner = np.flatnonzero((np.asarray(model.status) == 0) & (model.pipe_from < model.n_junctions)
                           & (model.pipe_to < model.n_junctions))
    return _closed_pipe_day(model, plan, inner, rng, seed, min_misfit, tries)


def _closed_pipe_day(model, plan, candidates, rng, seed, min_misfit, tries):
    """Draw a pipe of ``candidates`` to close in the truth until a test of ``plan`` sees it."""
    from calib.hydraulics import NetworkSolver, Snapshot
    from calib.network.model import PipeStatus
    solver = NetworkSolver(model, headloss="hazen-williams")
    sim = synthetic.synthetic_tests(model, model.roughness, plan, sigma=1e-9, seed=0, solver=solver)
    for _ in range(tries):
        k = int(rng.choice(candidates))
        status = np.array(model.status, copy=True)
        status[k] = PipeStatus.CLOSED
        truth = model.replace(status=status)
        try:
            # a closure that cuts a junction off (even one without demand, e.g. a reducing valve's
            # inlet) is not a state a crew finds: draw another
            if NetworkSolver(truth, headloss="hazen-williams").solve(Snapshot()).isolated:
                continue
            tests = synthetic.synthetic_tests(truth, truth.roughness, plan, sigma=units.PSI,
                                              seed=seed + 1, round_to=0.5 * units.PSI)
        except Exception:  # the closure cut a junction with demand off: draw another  # noqa: BLE001
            continue
        r = (sim.pressure - tests.pressure) / tests.sigma
        per_test = np.bincount(tests.test, weights=r ** 2, minlength=len(plan))
        t = int(np.argmax(per_test))
        if per_test[t] >= min_misfit:
            return ClosureTrial(model, tests, k, t, float(per_test[t]))
    return None
