"""calib.parallel: the same results at one and several workers, the first error as a serial run
raises it, the serial fallback, and no worker process left behind (after an error, Ctrl-C or a
worker's death). The reference is the plain serial loop ``[task(x) for x in items]``."""

import os
import time

import pytest

from calib import parallel
from calib.errors import CalibrationError, InputError

needs_fork = pytest.mark.skipif(not parallel.can_fork(), reason="no fork on this platform")


def _children() -> list[int]:
    """Pids of this process's live children (zombies included: they are still listed)."""
    me, out = os.getpid(), []
    for name in os.listdir("/proc"):
        if name.isdigit():
            try:
                with open(f"/proc/{name}/stat") as f:
                    fields = f.read().rsplit(")", 1)[1].split()
            except OSError:
                continue
            if int(fields[1]) == me:
                out.append(int(name))
    return out


@pytest.fixture
def no_new_children():
    before = set(_children())
    yield
    left = set(_children()) - before
    assert not left, f"worker processes left behind: {sorted(left)}"


_worker_busy = None  # an Event made before the fork: set by a worker as it takes a task


@pytest.fixture
def worker_busy():
    """The parent's tasks wait (up to 10 s) until a worker has taken one, so that a slow fork
    (a loaded machine, a large test process) cannot leave every task to the parent."""
    global _worker_busy
    import multiprocessing
    _worker_busy = multiprocessing.get_context("fork").Event()
    yield
    _worker_busy = None


def _meet():
    """In a worker: say it is busy; here: wait for that."""
    if _worker_busy is None:
        return
    if parallel.in_worker():
        _worker_busy.set()
    else:
        _worker_busy.wait(10)


class State:
    """A stand-in for a fitted problem: tasks change it; ``reset`` puts it back."""

    def __init__(self):
        self.value = 10

    def task(self, x):
        _meet()
        time.sleep(0.02)
        self.value += x  # a task that ran before would leave its trace here without reset
        return self.value, os.getpid()


@needs_fork
@pytest.mark.parametrize("workers", [2, 3])
def test_same_results_as_the_serial_loop_at_any_worker_count(workers, no_new_children,
                                                               worker_busy):
    items = list(range(1, 9))
    s = State()
    expected = [10 + x for x in items]  # every task from the reset state
    done = []
    out = parallel.run(s.task, items, reset=lambda: setattr(s, "value", 10), workers=workers,
                       done=lambda i, r: done.append(i))
    assert [v for v, _pid in out] == expected
    assert len({pid for _v, pid in out}) >= 2  # the work was really shared out
    assert sorted(done) == list(range(len(items)))  # each result reported once, here
    assert s.value == 10  # the caller's state as it was
    serial = parallel.run(s.task, items, reset=lambda: setattr(s, "value", 10), workers=1)
    assert [v for v, _ in serial] == expected
    assert {pid for _v, pid in serial} == {os.getpid()}


def test_without_reset_the_serial_loop_carries_state():
    # the property the reset gives is not automatic: the same tasks without it drift
    s = State()
    out = parallel.run(s.task, [1, 2, 3], workers=1)
    assert [v for v, _ in out] == [11, 13, 16]


def test_serial_fallback(monkeypatch, no_new_children):
    monkeypatch.setenv(parallel.WORKERS_ENV, "1")
    assert parallel.available_workers() == 1
    out = parallel.run(lambda x: (x * x, os.getpid()), range(5))
    assert out == [(x * x, os.getpid()) for x in range(5)]
    monkeypatch.delenv(parallel.WORKERS_ENV)
    monkeypatch.setattr(parallel, "can_fork", lambda: False)  # Windows, the Android build
    assert parallel.available_workers() == 1
    assert parallel.run(lambda x: os.getpid(), range(4), workers=2) == [os.getpid()] * 4


def test_serial_off_the_main_thread(no_new_children):
    # an app's background thread: no fork of a process whose other threads may hold locks
    import threading

    out = []
    t = threading.Thread(target=lambda: out.extend(parallel.run(lambda x: os.getpid(), range(4),
                                                                workers=2)))
    t.start()
    t.join()
    assert out == [os.getpid()] * 4


def test_bad_worker_count_names_the_variable(monkeypatch):
    if not parallel.can_fork():
        pytest.skip("no fork: the variable is not read")
    monkeypatch.setenv(parallel.WORKERS_ENV, "two")
    with pytest.raises(InputError, match="CALIB_WORKERS='two' is not a whole number"):
        parallel.available_workers()


def _failing(x):
    if x == 1:
        time.sleep(0.3)  # fails last in time, first in order
        raise CalibrationError("the solver did not converge for snapshot 'T3 residual'")
    if x == 2:
        raise ValueError("a later failure that a serial run never reaches")
    time.sleep(0.02)
    return x


@needs_fork
@pytest.mark.parametrize("workers", [1, 2])
def test_first_error_reaches_the_caller_as_a_serial_run_raises_it(workers, no_new_children):
    resets = []
    with pytest.raises(CalibrationError) as err:
        parallel.run(_failing, range(8), reset=lambda: resets.append(1), workers=workers)
    assert str(err.value) == "the solver did not converge for snapshot 'T3 residual'"
    assert resets  # the state is put back after the error too


class Unpicklable(Exception):
    def __init__(self, a, b):
        super().__init__(f"{a} and {b}")


def _unpicklable(x):
    _meet()
    if parallel._in_worker:
        raise Unpicklable("left", "right")
    return x


@needs_fork
def test_an_error_that_cannot_cross_keeps_its_message(no_new_children, worker_busy):
    # itself where something registered a way to pickle it (e.g. a library loaded earlier in the
    # test run), else a RuntimeError naming its type: the message is the same either way
    with pytest.raises((RuntimeError, Unpicklable)) as err:
        parallel.run(_unpicklable, range(4), workers=2)
    assert str(err.value) == ("left and right" if err.type is Unpicklable
                              else "Unpicklable: left and right")


def _dies_in_worker(x):
    if parallel._in_worker:
        os._exit(3)  # killed, out of memory: no answer
    time.sleep(0.05)
    return x * 2


@needs_fork
def test_tasks_of_a_worker_that_died_are_run_here(no_new_children):
    assert parallel.run(_dies_in_worker, range(6), workers=2) == [0, 2, 4, 6, 8, 10]


def _interrupted(x):
    _meet()
    if not parallel._in_worker:
        time.sleep(0.1)  # the worker is in its long task by now
        raise KeyboardInterrupt  # as Ctrl-C raises it in the main process
    time.sleep(30)
    return x


@needs_fork
def test_ctrl_c_stops_the_workers_at_once(no_new_children, worker_busy):
    t0 = time.perf_counter()
    with pytest.raises(KeyboardInterrupt):
        parallel.run(_interrupted, range(4), workers=2)
    assert time.perf_counter() - t0 < 4.0  # terminated: neither its 30 s task nor join's 5 s


@needs_fork
def test_no_nesting_inside_a_worker(worker_busy):
    def task(x):
        _meet()
        return parallel.available_workers(), parallel._in_worker

    out = parallel.run(task, range(6), workers=2)
    assert all(n == 1 for n, inside in out if inside)
    assert any(inside for _n, inside in out)


def _in_daemon(queue):
    queue.put(parallel.run(lambda x: os.getpid(), range(3), workers=2) == [os.getpid()] * 3)


@needs_fork
def test_serial_inside_a_daemonic_process():
    # a daemonic process (a Dask worker's, a multiprocessing pool's) may not start children
    import multiprocessing

    ctx = multiprocessing.get_context("fork")
    queue = ctx.Queue()
    p = ctx.Process(target=_in_daemon, args=(queue,), daemon=True)
    p.start()
    assert queue.get(timeout=30) is True
    p.join()


def test_small_networks_stay_in_one_process_unless_told(monkeypatch):
    from types import SimpleNamespace

    monkeypatch.delenv(parallel.WORKERS_ENV, raising=False)
    assert parallel.workers_for(SimpleNamespace(n_pipes=531)) == 1  # the demo town's size
    assert parallel.workers_for(SimpleNamespace(n_pipes=7_938)) is None  # the cores decide
    monkeypatch.setenv(parallel.WORKERS_ENV, "2")
    assert parallel.workers_for(SimpleNamespace(n_pipes=531)) is None  # the variable decides


# --- run_jobs: several jobs' tasks in one run ------------------------------------------------------
def _jobs(log):
    """Two ``State`` jobs whose tasks change their own state (each put back by its own reset), a
    job without tasks, and the order of the callbacks in ``log``."""
    a, b = State(), State()
    a.value, b.value = 10, 1000

    def job(name, s, start, items, rank):
        return parallel.Job(s.task, items, reset=lambda: setattr(s, "value", start),
                            done=lambda i, r: log.append(("done", name, i)),
                            finished=lambda values: log.append(("finished", name, list(values))),
                            after=lambda values: log.append(("after", name, s.value)),
                            unwrap=lambda r: r[0], rank=rank)
    return [job("a", a, 10, [1, 2, 3], 1), job("none", State(), 10, [], 0),
            job("b", b, 1000, [5, 6], lambda x: 0 if x == 6 else 2)]


@pytest.mark.parametrize("workers", [1, 2])
def test_jobs_in_one_run_give_each_jobs_serial_values(workers, no_new_children, request):
    # reference: each job alone, its tasks from its own reset state (``run``); across jobs the
    # tasks are taken by rank (b's 6 first, a's, then b's 5), every value as alone
    if workers > 1:
        if not parallel.can_fork():
            pytest.skip("no fork on this platform")
        request.getfixturevalue("worker_busy")  # a worker takes tasks too
    log = []
    out = parallel.run_jobs(_jobs(log), workers=workers)
    assert out == [[11, 12, 13], [], [1005, 1006]]
    finished = [e for e in log if e[0] == "finished"]
    assert finished[0] == ("finished", "none", [])  # no tasks: finished before any task starts
    assert sorted(finished[1:]) == [("finished", "a", [11, 12, 13]), ("finished", "b", [1005, 1006])]
    for name, n in (("a", 3), ("b", 2)):  # each task reported once, before its job is finished
        dones = [i for i, e in enumerate(log) if e[:2] == ("done", name)]
        assert len(dones) == n and max(dones) < log.index(next(e for e in finished if e[1] == name))
    # ``after``: once the run has ended, with every job's state put back
    assert [e for e in log if e[0] == "after"] == [("after", "a", 10), ("after", "none", 10),
                                                   ("after", "b", 1000)]
    assert log[-3:] == [e for e in log if e[0] == "after"]


def test_jobs_run_in_the_order_of_their_ranks():
    order = []
    jobs = [parallel.Job(lambda x: order.append(x), items, rank=rank)
            for items, rank in (([1, 2], 1), ([3], 0), ([4, 5], lambda x: 2 if x == 4 else 0))]
    parallel.run_jobs(jobs, workers=1)
    assert order == [3, 5, 1, 2, 4]  # rank 0 in the jobs' order, then 1, then 2


@needs_fork
@pytest.mark.parametrize("workers", [1, 2])
def test_first_error_of_the_jobs_reaches_the_caller(workers, no_new_children):
    # the first failing task in the run's order, as ``run`` raises it; every job's state put back
    resets, finished = [], []
    jobs = [parallel.Job(lambda x: x, [0, 3], reset=lambda: resets.append("a"),
                         finished=finished.append),
            parallel.Job(_failing, range(8), reset=lambda: resets.append("b"),
                         finished=finished.append)]
    with pytest.raises(CalibrationError, match="snapshot 'T3 residual'"):
        parallel.run_jobs(jobs, workers=workers)
    assert "a" in resets and "b" in resets and resets[-2:] == ["a", "b"]
    assert finished == [[0, 3]]  # the first job's tasks all ran: it was finished; not the other


# --- Owners: workers that keep their state from one request to the next ------------------------
class Counter:
    """A worker's state: each share adds what it is sent to its own total."""

    def __init__(self):
        self.total = {}

    def serve(self, share, request):
        if request == "die" and parallel._in_worker:
            os._exit(3)  # killed, out of memory: no answer
        if request == "fail":
            raise CalibrationError(f"the solver did not converge for snapshot 'T{share} static'")
        if request == "sleep":
            time.sleep(30)
        self.total[share] = self.total.get(share, 0) + request
        return share, self.total[share], os.getpid()


@needs_fork
def test_owners_keep_their_state_between_requests(no_new_children):
    c = Counter()
    owners = parallel.Owners(c.serve, 3)
    try:
        seen = []
        for x in (1, 10, 100):
            for k in (1, 2):
                owners.ask(k, x * k)
            seen.append([owners.answer(k) for k in (1, 2)])
    finally:
        owners.close()
    # each worker's total grew by what it was sent, in its own process; this one's is untouched
    assert [[(k, t) for k, t, _pid in row] for row in seen] == \
        [[(1, 1), (2, 2)], [(1, 11), (2, 22)], [(1, 111), (2, 222)]]
    pids = {pid for row in seen for _k, _t, pid in row}
    assert len(pids) == 2 and os.getpid() not in pids
    assert c.total == {}
    assert owners.closed and parallel.open_owners() == 0


@needs_fork
def test_an_owners_error_reaches_the_caller_and_the_worker_goes_on(no_new_children):
    owners = parallel.Owners(Counter().serve, 2)
    try:
        owners.ask(1, "fail")
        with pytest.raises(CalibrationError, match="did not converge for snapshot 'T1 static'"):
            owners.answer(1)
        owners.ask(1, 5)
        assert owners.answer(1)[:2] == (1, 5)
    finally:
        owners.close()


@needs_fork
def test_an_owner_that_died_is_said_lost(no_new_children):
    owners = parallel.Owners(Counter().serve, 2)
    try:
        owners.ask(1, "die")
        with pytest.raises(parallel.WorkerLost):
            owners.answer(1)
    finally:
        owners.close()


@needs_fork
def test_ctrl_c_closes_the_owners_at_once(no_new_children):
    # as ``fit`` does (``tasks.closing_pools``): the owners opened inside are closed on the way out
    from calib.calibration.tasks import closing_pools

    @closing_pools
    def work():
        owners = parallel.Owners(Counter().serve, 2)
        owners.ask(1, "sleep")  # the worker is busy for 30 s
        time.sleep(0.1)
        raise KeyboardInterrupt  # as Ctrl-C raises it in the main process

    kept = parallel.Owners(Counter().serve, 2)  # opened before: not the function's to close
    try:
        t0 = time.perf_counter()
        with pytest.raises(KeyboardInterrupt):
            work()
        assert time.perf_counter() - t0 < 4.0  # terminated, not waited for
        assert parallel.open_owners() == 1 and not kept.closed
        kept.ask(1, 7)
        assert kept.answer(1)[:2] == (1, 7)
    finally:
        kept.close()


def test_the_benchmark_removes_its_temporary_folder(monkeypatch, tmp_path):
    # benchmarks/parallel.py writes outputs (and a generated grid) to a calib-parallel-* folder:
    # gone when it ends, also when a run fails
    import importlib.util
    import tempfile
    from pathlib import Path

    path = Path(__file__).resolve().parents[2] / "benchmarks" / "parallel.py"
    spec = importlib.util.spec_from_file_location("benchmark_parallel", path)
    bench = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(bench)
    monkeypatch.setattr(tempfile, "tempdir", str(tmp_path))
    made = []

    def fails(args, tmp):
        made.append(tmp)
        (tmp / "demo-0").mkdir()  # as a run's output folder
        raise RuntimeError("a run failed")

    monkeypatch.setattr(bench, "_run", fails)
    with pytest.raises(RuntimeError, match="a run failed"):
        bench.main(["--cases", "demo", "--repeats", "1"])
    assert made and made[0].name.startswith("calib-parallel-") and made[0].parent == tmp_path
    assert not made[0].exists() and not any(tmp_path.iterdir())
