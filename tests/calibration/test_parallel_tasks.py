"""The fit's independent work on several cores (calib.calibration.tasks, calib.parallel): the same
numbers, to the last bit, at one and two workers and in any order of the tasks; the problem left as
it was but for its counts. The reference is the serial run (CALIB_WORKERS=1)."""

import numpy as np
import pytest

from calib import parallel
from calib.calibration.estimate import _profile_end, estimate, refine_intervals
from calib.calibration.problem import CalibrationProblem
from calib.calibration.synthetic import synthetic_tests
from calib.calibration.tasks import on_problem
from calib.hydraulics import NetworkSolver

needs_fork = pytest.mark.skipif(not parallel.can_fork(), reason="no fork on this platform")


def _fitted(small):
    """The small grid where all three groups need the profile (as in test_intervals_scale), fitted
    with a solver of its own, so that every call starts from the same state."""
    net, grp, plan, _solver = small
    tests = synthetic_tests(net, np.array([70.0, 100.0, 130.0])[grp.index], plan, seed=2)
    prob = CalibrationProblem(net, tests, grp, solver=NetworkSolver(net))
    est = estimate(prob, prob.x0, "linear", 2.0, 60, np.ones(tests.n_readings, dtype=bool))
    return prob, est


def _ends(prob, est, order, workers):
    cut = est.t ** 2
    found = on_problem(prob, lambda e: _profile_end(prob, est, e[0], e[1], cut), order,
                       workers=workers)
    return dict(zip(order, found))


def test_each_end_the_same_in_any_order_of_the_tasks(small):
    # without the reset a task starts from the solutions the one before it left (warm starts):
    # the same ends would then differ in their last digits with the order
    prob, est = _fitted(small)
    ends = [(i, d) for i in range(3) for d in (-1.0, 1.0)]
    forward = _ends(prob, est, ends, workers=1)
    backward = _ends(prob, est, ends[::-1], workers=1)
    assert forward == backward  # exact: floats compared bit for bit


def test_the_problem_is_left_as_it_was_but_for_its_counts(small):
    prob, est = _fitted(small)
    key, cache, warm = prob._cache_key, prob._cache, dict(prob.warm)
    counts = (prob.n_solves, prob.n_solver_calls, prob.n_iterations)
    seen = []
    prob.progress = seen.append
    found = _ends(prob, est, [(0, -1.0), (1, 1.0)], workers=1)
    assert prob._cache_key == key and prob._cache is cache
    assert prob.warm.keys() == warm.keys() and all(prob.warm[k] is warm[k] for k in warm)
    added = prob.n_solves - counts[0]
    assert added > 0 and prob.n_solver_calls > counts[1] and prob.n_iterations > counts[2]
    assert len(seen) == added  # every solve reported once
    assert sum(points for _v, _o, points in found.values()) > 0


@needs_fork
def test_profile_intervals_bit_identical_at_one_and_two_workers(small, monkeypatch):
    out = {}
    for workers in ("1", "2"):
        monkeypatch.setenv(parallel.WORKERS_ENV, workers)
        prob, est = _fitted(small)
        est = refine_intervals(prob, est, prob.c_cols)
        out[workers] = (est.low.tobytes(), est.high.tobytes(), est.low_open.tobytes(),
                        est.high_open.tobytes(), est.n_profile_fits, prob.n_solves)
    assert out["1"] == out["2"]


def test_a_solver_that_forgot_gives_a_fresh_solvers_numbers():
    # on a network where a warm solve reuses the last factorization (1,741 pipes: conjugate
    # gradients preconditioned with it), the last solve leaves its trace in the next one's last
    # digits (5e-11 m measured); after ``forget`` the next solve is a fresh solver's, bit for bit
    from calib.calibration.synthetic import grid_network
    from calib.hydraulics import Snapshot

    net = grid_network(30, 30, n_groups=3, seed=4)
    at = str(net.node_ids[400])
    a, b, c = (Snapshot(extra_demand={at: q}) for q in (0.059, 0.06, 0.0601))
    if NetworkSolver(net).pattern.backend != "cholmod":
        pytest.skip("SuperLU: no factorization is kept for reuse here (CHOLMOD's is)")
    start = NetworkSolver(net).solve(a)
    fresh = NetworkSolver(net).solve(b, warm_start=start)
    used = NetworkSolver(net)
    used.solve(c, warm_start=start)
    kept = used.solve(b, warm_start=start)
    used.solve(c, warm_start=start)
    used.forget()
    again = used.solve(b, warm_start=start)
    assert not np.array_equal(kept.head, fresh.head)  # what the reset is for
    assert np.array_equal(again.head, fresh.head) and np.array_equal(again.flow, fresh.flow)


@needs_fork
def test_the_demo_fit_and_its_report_data_bit_identical_at_one_and_two_workers(demo_day, monkeypatch):
    # the whole pipeline on the demo town: profile checks, two leave-one-out refits (their notes),
    # the report's hydrant curves and fire-flow table; every number compared bit for bit
    from calib.calibration import fit, report
    from calib.fireflow.fitsummary import html_section

    net, tests = demo_day
    out = {}
    for workers in ("1", "2"):
        monkeypatch.setenv(parallel.WORKERS_ENV, workers)
        stages = []
        result = fit(net, tests, progress=lambda n, stage: stages.append(stage))
        curves = report._curves_data(result, "us")
        fire = html_section(result, "us")
        est = result.estimate
        out[workers] = dict(
            ends=(est.x.tobytes(), est.low.tobytes(), est.high.tobytes()),
            influence=list(result.influence), n_solves=result.n_solves,
            # every solve reported once, under its phase, the refits' readings named: in one run
            # of tasks the processes' reports interleave in the order their tasks end
            stages=sorted(s.split(":")[0] for s in stages),
            readings=sorted({s.split(":", 1)[1] for s in stages if ":" in s}),
            fire=fire, curves=[None if p is None else (p["flow"].tobytes(), p["pressure"].tobytes())
                    for p in curves["panels"]])
    assert any(out["1"]["influence"])  # the case does refit and note
    assert sum(p is not None for p in out["1"]["curves"]) >= 2
    assert out["1"]["fire"].count("<tr>") >= 3  # a few hydrants in the table
    assert out["1"] == out["2"]



@needs_fork
def test_an_error_in_a_refit_reads_the_same_from_a_worker(tmp_path, capsys, monkeypatch):
    # ``calib fit`` on the demo town with its leave-one-out refits failing (at two workers one of
    # them fails in a worker): the same exit code and message as on one core, naming the first
    # refit's reading as a serial run does
    import importlib
    from pathlib import Path

    from calib.cli import main
    from calib.errors import CalibrationError

    fitmod = importlib.import_module("calib.calibration.fit")

    def failing(est, problem, row, *args, **kwargs):
        raise CalibrationError(f"the solver did not converge in the refit without row {row}")

    monkeypatch.setattr(fitmod, "loo_refit", failing)
    demo = Path(__file__).resolve().parents[2] / "field_samples" / "tallowmere"
    seen = {}
    for workers in ("1", "2"):
        monkeypatch.setenv(parallel.WORKERS_ENV, workers)
        code = main(["fit", str(demo / "network"), str(demo / "tests"), "--out",
                     str(tmp_path / workers), "--no-report", "--quiet"])
        err = capsys.readouterr().err
        seen[workers] = (code, [ln for ln in err.splitlines() if "did not converge" in ln])
    assert seen["1"][0] != 0 and len(seen["1"][1]) == 1
    assert seen["1"] == seen["2"], seen


def test_no_tasks_no_problems():
    # a fit without leave-one-out candidates hands an empty list of refits
    assert on_problem([], lambda k: k, []) == []
