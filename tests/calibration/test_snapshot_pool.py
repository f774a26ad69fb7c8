"""The fit's evaluations with their snapshots shared out between processes that keep them
(calib.calibration.tasks.SnapshotPool): the same numbers, to the last bit, as the serial run
(CALIB_WORKERS=1), the same error, and no worker process left behind.

The network: a 30 x 30 grid (1,741 pipes), where a warm solve reuses the factorization kept
beside the snapshot's last solution (its numbers then carry that history in their last digits),
solved snapshot by snapshot (no stacks, as from 2,000 pipes up)."""

import os

import numpy as np
import pytest

from calib import parallel
from calib.calibration import problem as problem_module
from calib.calibration import tasks
from calib.calibration.problem import CalibrationProblem
from calib.calibration.synthetic import grid_network, plan_tests, synthetic_tests
from calib.errors import CalibrationError, ConvergenceError
from calib.calibration.groups import make_groups
from calib.hydraulics import NetworkSolver
from tests.foundation.test_parallel import _children

needs_fork = pytest.mark.skipif(not parallel.can_fork() or len(os.sched_getaffinity(0)) < 2,
                                reason="no fork or one core here: the pool is not used")


@pytest.fixture(scope="module")
def grid():
    net = grid_network(30, 30, n_groups=3, seed=4)
    grp = make_groups(net)
    plan = plan_tests(net, 6, seed=1, flow_gpm=(1000.0, 1500.0))
    tests = synthetic_tests(net, np.array([70.0, 100.0, 130.0])[grp.index], plan, seed=2)
    return net, grp, tests


@pytest.fixture
def unstacked(monkeypatch):
    """Snapshots solved one by one (as on networks from 2,000 pipes up), a pool from 2 workers
    whatever the network's size, and the pools started recorded."""
    monkeypatch.setattr(problem_module, "STACK_MAX_NETWORK_PIPES", 0)
    started = []
    start = tasks.SnapshotPool.start.__func__

    def recorded(cls, problem):
        pool = start(cls, problem)
        started.append(pool)
        return pool

    monkeypatch.setattr(tasks.SnapshotPool, "start", classmethod(recorded))
    return started


@needs_fork
def test_the_fit_bit_identical_at_one_and_two_workers(grid, unstacked, monkeypatch):
    from calib.calibration import fit

    net, grp, tests = grid
    before = set(_children())
    out = {}
    for workers in ("1", "2"):
        monkeypatch.setenv(parallel.WORKERS_ENV, workers)
        unstacked.clear()
        stages = []
        result = fit(net, tests, prior="none", progress=lambda n, s: stages.append(s))
        est = result.estimate
        pools = [p for p in unstacked if p]
        out[workers] = dict(
            x=est.x.tobytes(), low=est.low.tobytes(), high=est.high.tobytes(),
            sd=est.sd.tobytes(), simulated=result.simulated.tobytes(), z=result.z.tobytes(),
            influence=list(result.influence), flag=list(result.flag), n_solves=result.n_solves,
            # every solve reported once under its phase (the processes' reports in any order)
            stages=sorted(s.split(":")[0] for s in stages),
            heads=[r.head.tobytes() for r in result.solutions.values()])
        if workers == "1":
            assert not pools
        else:  # the snapshots were really shared out, and every pool is closed again
            assert pools and all(p.closed for p in pools)
            assert all(len(p.owned[1]) >= 3 for p in pools)
    assert out["1"]["n_solves"] > 100
    assert out["1"] == out["2"]
    assert set(_children()) == before  # no worker process left


def test_a_snapshots_numbers_depend_on_its_own_history_only(grid, monkeypatch):
    # what makes the pool's numbers the serial ones: solved with a solver of its own, a snapshot
    # gives the same bits whether or not the others were solved between its own solves; with
    # one solver for all, whose memory for kept factorizations holds fewer than the snapshots
    # (here two), it does not: a solve then starts from another snapshot's factorization
    monkeypatch.setattr(problem_module, "STACK_MAX_NETWORK_PIPES", 0)
    monkeypatch.setenv(parallel.WORKERS_ENV, "1")
    net, grp, tests = grid
    if NetworkSolver(net).pattern.backend != "cholmod":
        pytest.skip("SuperLU: no factorization is kept beside solutions here")

    def heads(only_first: bool, owned: bool):
        prob = CalibrationProblem(net, tests, grp, solver=NetworkSolver(net))
        if not owned:
            prob._recent.solvers = []
            prob.solver._capacity = lambda: 2
        x = prob.x0.copy()
        out = []
        for step in range(4):
            x = x + np.array([3.0, -2.0, 1.0]) * (step + 1)
            if only_first:  # snapshot 0 alone, as its owner solves it
                own = prob._owned_solvers()
                prob._x_now = x
                snaps = prob.snapshots(x)
                warm = out[-1][1] if out else None
                solver = own[0] if own else prob.solver
                res = solver.solve(snaps[0], roughness=prob.roughness(x), warm_start=warm)
            else:
                res = prob.solve(x)[0]
            out.append((res.head.tobytes(), res))
        return [h for h, _r in out]

    assert heads(True, owned=True) == heads(False, owned=True)
    assert heads(True, owned=False) != heads(False, owned=False)


@needs_fork
def test_a_snapshot_that_fails_reads_as_serially(grid, unstacked, monkeypatch):
    # two snapshots fail: an early one owned by the worker and a later one owned here; at two
    # workers as at one, the error names the first in order, in the same words
    net, grp, tests = grid
    probe = CalibrationProblem(net, tests, grp, solver=NetworkSolver(net))
    labels = [f"{tests.test_ids[t]} {k}" for t, k in probe.pairs]
    n = len(labels)
    share = tasks.SnapshotPool.deal(probe.pairs, 2)
    theirs = min(i for i in range(1, n) if share[i] == 1)
    mine = max(i for i in range(1, n) if share[i] == 0)
    assert theirs < mine
    failing = {labels[theirs], labels[mine]}
    solve = NetworkSolver.solve

    def fails(self, snapshot=None, roughness=None, warm_start=None):
        if snapshot is not None and snapshot.label in failing and warm_start is not None \
                and warm_start.snapshot.label == snapshot.label:  # from its second solve on
            raise ConvergenceError("no convergence in 100 iterations")
        return solve(self, snapshot, roughness=roughness, warm_start=warm_start)

    monkeypatch.setattr(NetworkSolver, "solve", fails)
    before = set(_children())
    seen = {}
    for workers in ("1", "2"):
        monkeypatch.setenv(parallel.WORKERS_ENV, workers)
        unstacked.clear()
        prob = CalibrationProblem(net, tests, grp, solver=NetworkSolver(net))

        @tasks.closing_pools
        def two_evaluations():
            prob.solve(prob.x0)
            prob.solve(prob.x0 + 1.0)

        with pytest.raises(CalibrationError) as err:
            two_evaluations()
        seen[workers] = (str(err.value), prob.n_solves)
        assert bool([p for p in unstacked if p]) == (workers == "2")
    assert f"snapshot '{labels[theirs]}'" in seen["1"][0]
    assert seen["1"] == seen["2"]
    assert set(_children()) == before


@needs_fork
def test_a_worker_that_died_leaves_its_snapshots_here(grid, unstacked, monkeypatch):
    import signal

    net, grp, tests = grid
    monkeypatch.setenv(parallel.WORKERS_ENV, "2")
    before = set(_children())
    prob = CalibrationProblem(net, tests, grp, solver=NetworkSolver(net))

    @tasks.closing_pools
    def run():
        prob.solve(prob.x0)
        pool = prob._recent.pool
        assert pool and not pool.closed
        pid = pool.owners._procs[0].pid
        os.kill(pid, signal.SIGKILL)
        x = prob.x0 + np.array([2.0, -1.0, 3.0])
        return pool, prob.solve(x), prob.jacobian(x), x

    pool, results, J, x = run()
    assert pool.closed and prob._recent.pool is False
    # the same numbers as a problem that kept nothing, to the solver's tolerance
    fresh = CalibrationProblem(net, tests, grp, solver=NetworkSolver(net), stack=False)
    for a, b in zip(results, fresh.solve(x)):
        np.testing.assert_allclose(a.head, b.head, atol=1e-5)
    np.testing.assert_allclose(J, fresh.jacobian(x), rtol=1e-5, atol=1e-8)
    assert set(_children()) == before


def test_serial_where_no_worker_may_start(grid, unstacked, monkeypatch):
    # outside a fit (``closing_pools``), one core asked for, off the main thread (the app), inside
    # on_problem's tasks, below parallel.MIN_PIPES: no pool
    import threading

    net, grp, tests = grid
    monkeypatch.setenv(parallel.WORKERS_ENV, "2")
    prob = CalibrationProblem(net, tests, grp, solver=NetworkSolver(net))
    prob.solve(prob.x0)  # a problem used on its own: nothing would close a pool
    assert prob._recent.pool is False
    tasks._scopes += 1  # as inside ``fit``
    try:
        _serial_inside_a_fit(net, grp, tests, monkeypatch)
    finally:
        tasks._scopes -= 1


def _serial_inside_a_fit(net, grp, tests, monkeypatch):
    import threading

    monkeypatch.setenv(parallel.WORKERS_ENV, "1")
    prob = CalibrationProblem(net, tests, grp, solver=NetworkSolver(net))
    prob.solve(prob.x0)
    assert prob._recent.pool is False
    monkeypatch.setenv(parallel.WORKERS_ENV, "2")
    prob = CalibrationProblem(net, tests, grp, solver=NetworkSolver(net))
    t = threading.Thread(target=prob.solve, args=(prob.x0,))
    t.start()
    t.join()
    assert prob._recent.pool is False
    prob = CalibrationProblem(net, tests, grp, solver=NetworkSolver(net))
    assert tasks.on_problem(prob, lambda k: bool(prob.solve(prob.x0 + k)) and prob._recent.pool,
                            [1.0], workers=1) == [False]
    monkeypatch.delenv(parallel.WORKERS_ENV)  # below parallel.MIN_PIPES: one process
    prob = CalibrationProblem(net, tests, grp, solver=NetworkSolver(net))
    prob.solve(prob.x0)
    assert net.n_pipes < parallel.MIN_PIPES and prob._recent.pool is False
    if parallel.can_fork() and len(os.sched_getaffinity(0)) >= 2:  # where one may: it starts
        monkeypatch.setenv(parallel.WORKERS_ENV, "2")
        prob = CalibrationProblem(net, tests, grp, solver=NetworkSolver(net))
        prob.solve(prob.x0)
        assert prob._recent.pool and not prob._recent.pool.closed
        prob._recent.pool.close()
