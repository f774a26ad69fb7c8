"""The fit's stop rule (``calib.calibration.fit.FIT_TOLERANCES``: energy residual at the returned
point, no head step test, a loose flow step): warm solves along a fit-like path of roughness
changes, each snapshot started from its own last solution as the fit does, give the heads and head
sensitivities of a tight solve, on a looped network and on the demo town (reducing valves, whose
states need the head step test kept). Reference: cold solves of the same snapshots with a solver
100 times tighter than the solver's defaults (heads to 1e-8 m, flows to 1e-9, mass to 1e-10),
with each backend."""

import numpy as np
import pytest

from calib.calibration.fit import FIT_TOLERANCES
from calib.hydraulics import NetworkSolver, Snapshot, factor

from .conftest import random_looped

cholmod = pytest.mark.skipif(not factor.cholmod_available(),
                             reason="scikit-sparse (CHOLMOD) not installed")
BACKENDS = ["superlu", pytest.param("cholmod", marks=cholmod)]
TIGHT = dict(head_tol=1e-8, energy_tol=1e-8, flow_tol=1e-9, mass_tol=1e-10)
GROUPS = 3


def _path(net, seed=3, repeat=2):
    """Roughness vectors of a fit's evaluations: three groups of pipes whose C moves by steps
    that shrink as a least-squares search's do (10 % down to 0.01 %), each size ``repeat``
    times."""
    rng = np.random.default_rng(seed)
    group = np.arange(net.n_pipes) % GROUPS
    x = np.zeros(GROUPS)
    out = []
    for size in (0.1, 0.05, 0.02, 0.01, 3e-3, 1e-3, 3e-4, 1e-4):
        for _ in range(repeat):
            x = x + size * rng.standard_normal(GROUPS)
            out.append(net.roughness * np.exp(x[group]))
    return out, group


def _sensitivities(solver, result, group):
    """Heads' derivatives with respect to each group's C (as the fit's Jacobian)."""
    d = solver.dheadloss_droughness(result)
    dF1 = np.zeros((len(solver.link_from), GROUPS))
    dF1[np.arange(solver.np_), group] = d
    dH, _ = solver.sensitivities(result, dF1, np.zeros((solver.nj, GROUPS)))
    return dH


def _walk(net, tolerances, path, group, loadings):
    solver = NetworkSolver(net, **tolerances)
    last, out, iterations = {}, [], 0
    for rough in path:
        for snap in loadings:
            res = solver.solve(snap, roughness=rough, warm_start=last.get(snap.label))
            last[snap.label] = res
            iterations += res.iterations
            out.append((res.head.copy(), _sensitivities(solver, res, group)))
    return out, iterations


def _looped():
    net = random_looped(600, seed=11, n_sources=2)
    ids = net.node_ids
    return net, (Snapshot(extra_demand={str(ids[450]): 0.05}, label="A"),
                 Snapshot(extra_demand={str(ids[120]): 0.05}, label="B")), 2


def _demo_town(demo_day):
    """Six of the demo town's 14 snapshots of its day of tests (hydrants flowing, static), as the fit
    makes them."""
    from calib.calibration.groups import make_groups
    from calib.calibration.problem import CalibrationProblem
    net, tests = demo_day
    problem = CalibrationProblem(net, tests, make_groups(net, None))
    assert len(net.valves)
    return net, problem.snapshots(problem.x0)[16:22], 2


@pytest.mark.parametrize("backend", BACKENDS)
@pytest.mark.parametrize("case", ["looped", "demo town"])
def test_the_fits_stop_gives_the_heads_and_sensitivities_of_a_tight_solve(backend, case,
                                                                          monkeypatch, demo_day):
    monkeypatch.setenv(factor.ENV, backend)
    net, loadings, repeat = _looped() if case == "looped" else _demo_town(demo_day)
    path, group = _path(net, repeat=repeat)
    ours, n_ours = _walk(net, FIT_TOLERANCES, path, group, loadings)
    tight = NetworkSolver(net, **TIGHT)
    k = 0
    for rough in path:
        for snap in loadings:
            ref = tight.solve(snap, roughness=rough)  # cold: no history shared with ours
            head, dH = ours[k]
            k += 1
            # within the stop's head tolerance with a margin of ten
            assert np.abs(head - ref.head).max() <= 0.1 * FIT_TOLERANCES["head_tol"]
            ref_dH = _sensitivities(tight, ref, group)
            np.testing.assert_allclose(dH, ref_dH, rtol=0, atol=1e-4 * np.abs(ref_dH).max())
    # and the point of the rule: fewer Newton iterations than the former step test asked for
    former = dict(head_tol=1e-4, flow_tol=1e-6, energy_tol=1e-4)
    _, n_former = _walk(net, former, path, group, loadings)
    assert n_ours < n_former


def test_a_stack_of_copies_stops_on_the_same_rule(monkeypatch):
    # the demo town's fit solves its snapshots as one stacked network (``stacked.StackedSolver``,
    # whose ``settled`` applies the rule to each copy); without valves the head step is left out
    # there too. Reference: tight cold solves of each copy's snapshot alone
    from calib.hydraulics.stacked import stacked_solver
    net, loadings, _ = _looped()
    path, _group = _path(net, repeat=1)
    base = NetworkSolver(net, **FIT_TOLERANCES)
    stack = stacked_solver(base, len(loadings))
    assert stack.solver.head_step is False
    tight = NetworkSolver(net, **TIGHT)
    warm, iterations = None, 0
    for rough in path:
        warm, copies = stack.solve(list(loadings), roughness=rough, warm=warm)
        iterations += warm.iterations
        for snap, res in zip(loadings, copies):
            ref = tight.solve(snap, roughness=rough)
            assert np.abs(res.head - ref.head).max() <= 0.1 * FIT_TOLERANCES["head_tol"]
    former = stacked_solver(NetworkSolver(net, head_tol=1e-4, flow_tol=1e-6, energy_tol=1e-4),
                            len(loadings))
    warm, n_former = None, 0
    for rough in path:
        warm, _ = former.solve(list(loadings), roughness=rough, warm=warm)
        n_former += warm.iterations
    assert iterations < n_former
