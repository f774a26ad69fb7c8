"""Independent tasks on the machine's cores: fork-started worker processes beside this one.

``run(task, items, reset=...)`` returns ``[task(item) for item in items]``, in the items' order,
with the tasks shared out between this process and ``workers - 1`` worker processes started by
``fork``: a worker inherits everything this process holds (a fitted problem, its solver and
factorizations), so a task sends nothing but its item's index in and a few numbers back.

The same answers whatever the number of workers: ``reset()`` is called before every task, in the
process that runs it, to put back the state the tasks start from (warm starts, kept
factorizations); a task then computes the same numbers here, in a worker, or after any other task.
After ``run`` the caller's state is back where it was (``reset()`` once more), so what follows does
not depend on which tasks ran here either.

Serial, in this process, where there is one core (``os.sched_getaffinity``), no ``fork`` (Windows,
macOS's default, the Android build), off the main thread (the app's background work), inside a
worker (no nesting) or a daemonic process (a Dask worker's), for a single task, or when
``CALIB_WORKERS=1`` says so. Errors: the first failing task's exception (in the items' order, as
a serial run would raise it) reaches the caller with its own type and message; tasks after it are
not started. A worker that dies without an answer has its tasks run here. Ctrl-C or an error
stops every worker (terminated and reaped: no zombie processes).

Which work is worth a worker is the caller's choice (``workers=``): a fork and a worker's start
cost about 15-25 ms here, and a task's result crosses back as a pickle.

``run_jobs(jobs)``: the tasks of several independent ``Job``s (each with its own ``reset``) in one
``run``, taken in the order of their ranks: no process waits for the other at the end of each
job, and a job's ``finished`` comes as soon as its own last result is in.

``Owners(serve, n)``: worker processes that keep their own state from one request to the next
(the fit's snapshots, each with its solver, across the fit's evaluations), for work whose state
is worth keeping where it was made.

Not here: what the tasks compute (``calib.calibration.tasks`` runs the fit's).
"""

from __future__ import annotations

import os
import pickle
import signal
import sys
import threading
import traceback

#: Environment variable: the most processes ``run`` uses (1: serial). Unset: one per core.
WORKERS_ENV = "CALIB_WORKERS"

_in_worker = False  # True in a worker process: tasks there run serially


#: Networks below this many pipes keep their tasks in one process unless ``CALIB_WORKERS`` says
#: otherwise: a task there lasts tens of ms (the demo town's 531 pipes: a hydrant curve 15 ms, a
#: leave-one-out refit 50-100 ms) against 15-25 ms to fork a worker, and ``calib fit``'s figure
#: worker draws on the second core during those phases. Measured on the demo town (in-process,
#: medians of 8, load 2.2): curves and fire-flow rows 0.35 s serial, 0.39 s at two workers; the
#: fit with its refits 1.19 s either way. The 7,938-pipe grid gains (benchmarks/README.md, "E").
MIN_PIPES = 2_000


def workers_for(network) -> int | None:
    """``run``'s ``workers`` for tasks on ``network``: 1 below ``MIN_PIPES`` pipes, else None (as
    many as ``available_workers``); None wherever ``CALIB_WORKERS`` is set (it decides)."""
    if os.environ.get(WORKERS_ENV, "").strip():
        return None
    return 1 if network.n_pipes < MIN_PIPES else None


def in_worker() -> bool:
    """True inside a worker process of ``run``."""
    return _in_worker


def can_fork() -> bool:
    """True where worker processes may be started by ``fork``: Linux, not the Android build (its
    app process must not fork), not inside a worker, and from the main thread only (an app's
    background thread runs its work serially: a fork copies one thread of a busy process)."""
    if _in_worker or not sys.platform.startswith("linux"):
        return False
    if threading.current_thread() is not threading.main_thread():
        return False
    from multiprocessing import process
    if process.current_process().daemon:  # e.g. a Dask worker process: it may have no children
        return False
    if hasattr(sys, "getandroidapilevel") or "ANDROID_ARGUMENT" in os.environ:
        return False
    return hasattr(os, "fork")


def available_workers() -> int:
    """How many processes may share independent tasks: the cores this process may run on, at most
    ``CALIB_WORKERS`` where set; 1 where ``can_fork()`` is False."""
    if not can_fork():
        return 1
    try:
        cores = len(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        cores = os.cpu_count() or 1
    text = os.environ.get(WORKERS_ENV, "").strip()
    if text:
        try:
            cores = min(cores, int(text))
        except ValueError:
            from calib.errors import InputError
            raise InputError(f"{WORKERS_ENV}={text!r} is not a whole number", field=WORKERS_ENV,
                             expected="a number of processes, e.g. 1 for one core") from None
    return max(1, cores)


def run(task, items, reset=None, workers: int | None = None, done=None) -> list:
    """``[task(item) for item in items]``, shared out between up to ``workers`` processes (default
    ``available_workers()``), the same list whatever that number.

    ``reset()``: puts back the state every task starts from; called before each task and once at
    the end (also after an error). ``done(index, result)``: called here as each task's result
    arrives (in completion order), e.g. to advance a progress bar.
    """
    items = list(items)
    n = available_workers() if workers is None else max(1, int(workers))
    n = min(n, len(items))
    if n <= 1 or not can_fork():
        return _serial(task, items, reset, done)
    return _forked(task, items, reset, done, n)


class Job:
    """Independent tasks for ``run_jobs``: ``task(item)`` for each of ``items``, each from the state
    ``reset()`` puts back (called before each of them, in the process that runs it, and once at
    the end). ``done(index, answer)``: called here with what each task returned, as it arrives (in
    completion order); ``finished(values)``: called here once every result of this job is in
    (items' order), while the other jobs' tasks may still run; ``after(values)``: called once the
    whole run has ended and every job's state is put back (e.g. to add up counts that ``reset``
    puts back). ``unwrap``: a task's value from what it returned, as ``finished``, ``after`` and
    the caller see it (default: what it returned). ``rank``: where its tasks come in ``run_jobs``'
    order, a number or a function of the item (lower first; equal ranks in the jobs' and the
    items' order)."""

    def __init__(self, task, items, reset=None, done=None, finished=None, after=None,
                 unwrap=None, rank=0):
        self.task, self.items, self.reset = task, list(items), reset
        self.done, self.finished, self.after, self.unwrap = done, finished, after, unwrap
        self.rank = rank

    def rank_of(self, item):
        return self.rank(item) if callable(self.rank) else self.rank

    def values(self, results) -> list:
        return list(results) if self.unwrap is None else [self.unwrap(v) for v in results]


def run_jobs(jobs, workers: int | None = None) -> list:
    """Every task of every ``Job`` in ``jobs``, in one ``run``: the tasks claimed in the order of
    their ranks (``Job.rank``; equal ranks in the jobs' order, a job's tasks in its items'), so
    that one job's last tasks and the next job's first share the processes instead of one process
    waiting for the other at each job's end (long tasks first, short ones last even out the
    processes' shares).
    Each task starts from its own job's state (its ``reset``); the same values whatever the
    number of processes. Returns per job the list of its values. Errors: as ``run`` (the first
    failing task in that order; tasks after it are not started)."""
    jobs = [j for j in jobs if j is not None]
    flat = sorted(((j, i) for j, job in enumerate(jobs) for i in range(len(job.items))),
                  key=lambda ji: jobs[ji[0]].rank_of(jobs[ji[0]].items[ji[1]]))
    results = [[_MISSING] * len(job.items) for job in jobs]
    left = [len(job.items) for job in jobs]

    def one(pair):
        job = jobs[pair[0]]
        if job.reset is not None:
            job.reset()
        return job.task(job.items[pair[1]])

    def done(k, value):
        j, i = flat[k]
        job = jobs[j]
        results[j][i] = value
        if job.done is not None:
            job.done(i, value)
        left[j] -= 1
        if not left[j] and job.finished is not None:
            job.finished(job.values(results[j]))

    for j, job in enumerate(jobs):  # a job without tasks is finished before any task starts
        if not left[j] and job.finished is not None:
            job.finished([])
    try:
        if flat:
            run(one, flat, workers=workers, done=done)
    finally:
        for job in jobs:
            if job.reset is not None:
                job.reset()
    values = [job.values(res) for job, res in zip(jobs, results)]
    for job, vals in zip(jobs, values):
        if job.after is not None:
            job.after(vals)
    return values


def _serial(task, items, reset, done) -> list:
    results = []
    try:
        for i, item in enumerate(items):
            if reset is not None:
                reset()
            results.append(task(item))
            if done is not None:
                done(i, results[-1])
    finally:
        if reset is not None:
            reset()
    return results


_MISSING = object()


def _forked(task, items, reset, done, n_workers) -> list:
    import multiprocessing
    from multiprocessing.connection import wait

    ctx = multiprocessing.get_context("fork")
    n = len(items)
    lock = ctx.Lock()
    shared = ctx.RawArray("q", [0, n])  # [next task to claim, first task not to start]
    results = [_MISSING] * n
    errors: dict[int, BaseException] = {}

    def claim():
        with lock:
            i = shared[0]
            if i >= shared[1]:
                return None
            shared[0] = i + 1
            return i

    def stop_before(i):  # a task failed: later ones need not run (their results would be dropped)
        with lock:
            shared[1] = min(shared[1], i)

    def keep(i, ok, value):
        if ok:
            results[i] = value
            if done is not None:
                done(i, value)
        else:
            errors[i] = value
            stop_before(i)

    procs, conns = [], []
    mine = claim()  # the first task is this process's: it starts (and reports) first, as serially
    try:
        for _ in range(n_workers - 1):
            recv, send = ctx.Pipe(duplex=False)
            p = ctx.Process(target=_worker, args=(task, items, reset, claim, stop_before, send),
                            daemon=True)
            p.start()
            send.close()
            procs.append(p)
            conns.append(recv)
        open_conns = list(conns)

        def drain(timeout):
            for c in wait(open_conns, timeout):
                try:
                    keep(*c.recv())
                except (EOFError, OSError):
                    open_conns.remove(c)  # the worker finished (or died)

        while True:  # this process takes tasks too; between them it reads what workers sent
            i, mine = (mine, None) if mine is not None else (claim(), None)
            if i is None:
                break
            if reset is not None:
                reset()
            try:
                value = task(items[i])
            except Exception as exc:
                keep(i, False, exc)
            else:
                keep(i, True, value)
            if open_conns:
                drain(0)
        while open_conns:
            drain(None)
        for p in procs:
            p.join()
        # a worker that died without an answer (killed, out of memory): its tasks are run here
        first_error = min(errors, default=n)
        for i in range(first_error):
            if results[i] is _MISSING:
                if reset is not None:
                    reset()
                try:
                    keep(i, True, task(items[i]))
                except Exception as exc:
                    keep(i, False, exc)
                    break
        if errors:
            raise errors[min(errors)]
        return results
    finally:
        for p in procs:
            _reap(p, 0)
        for c in conns:
            c.close()
        if reset is not None:
            reset()


def _reap(p, grace: float) -> None:
    """End worker process ``p``: ``grace`` seconds to end by itself, then terminated (then
    killed), and reaped: no zombie left."""
    if grace:
        p.join(grace)
    if p.is_alive():
        p.terminate()
    p.join(5)
    if p.is_alive():
        p.kill()
        p.join()
    p.close()


def _worker(task, items, reset, claim, stop_before, conn) -> None:
    """A worker's loop: claim the next task, run it from the reset state, send ``(index, ok,
    result or exception)``; Ctrl-C is the parent's to handle (it stops the workers)."""
    global _in_worker
    _in_worker = True
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        while True:
            i = claim()
            if i is None:
                return
            if reset is not None:
                reset()
            try:
                answer = (i, True, task(items[i]))
            except Exception as exc:
                stop_before(i)
                answer = (i, False, _portable(exc))
            try:
                conn.send(answer)
            except Exception as exc:  # a result that does not pickle
                stop_before(i)
                conn.send((i, False, _portable(exc)))
    finally:
        conn.close()


def _portable(exc: BaseException) -> BaseException:
    """``exc`` as it can cross to the parent: itself where it pickles back to the same type and
    message, else a RuntimeError with its type name and message. The worker's traceback rides along
    as a note (shown where a traceback is printed)."""
    tb = "".join(traceback.format_exception(type(exc), exc, exc.__traceback__))
    try:
        back = pickle.loads(pickle.dumps(exc))
        if type(back) is not type(exc) or str(back) != str(exc):
            raise TypeError("changed on the way")
    except Exception:
        back = RuntimeError(f"{type(exc).__name__}: {exc}")
    if hasattr(back, "add_note"):
        back.add_note("raised in a worker process:\n" + tb)
    return back


class WorkerLost(RuntimeError):
    """A worker of ``Owners`` ended without an answer (killed, out of memory)."""


_open_owners: list = []  # ``Owners`` not yet closed, oldest first (``close_owners``)


class Owners:
    """Worker processes that each keep their own state from one request to the next.

    ``Owners(serve, n)`` forks ``n - 1`` workers (shares 1 .. n-1; this process is share 0): a
    worker inherits everything this process holds, then answers each request sent to it with
    ``serve(share, request)``, in its own memory, which persists between requests (e.g. the
    solver states of the snapshots it owns). ``ask(share, request)`` sends, ``answer(share)``
    waits for the reply; between them this process does its own share. An exception in
    ``serve`` reaches the caller of ``answer`` with its type and message (``_portable``); a
    worker that died raises ``WorkerLost``. ``close()`` (also on Ctrl-C and errors through
    ``close_owners``) stops and reaps every worker. Workers run no nested workers, ignore
    Ctrl-C (the parent's to handle) and end when their parent's end of the pipe closes.

    Only where ``can_fork()``; which work is worth it is the caller's choice (a request and its
    answer cross as pickles).
    """

    def __init__(self, serve, n: int):
        import multiprocessing

        if not can_fork():
            raise RuntimeError("Owners need fork (see can_fork)")
        ctx = multiprocessing.get_context("fork")
        self.n = int(n)
        self.closed = False
        self._procs, self._conns = [], []
        _open_owners.append(self)
        try:
            for k in range(1, self.n):
                here, there = ctx.Pipe(duplex=True)
                p = ctx.Process(target=_owner, args=(serve, k, there, list(self._conns)),
                                daemon=True)
                p.start()
                there.close()
                self._procs.append(p)
                self._conns.append(here)
        except BaseException:
            self.close()
            raise

    def ask(self, share: int, request) -> None:
        """Send ``request`` to worker ``share`` (1 .. n-1)."""
        try:
            self._conns[share - 1].send(request)
        except (BrokenPipeError, EOFError, OSError) as exc:
            raise WorkerLost(f"worker {share} is gone ({exc})") from None

    def answer(self, share: int):
        """The reply of worker ``share`` to the last request; its error raised here."""
        try:
            ok, value = self._conns[share - 1].recv()
        except (EOFError, OSError) as exc:
            raise WorkerLost(f"worker {share} ended without an answer ({exc or 'no reply'})") \
                from None
        if not ok:
            raise value
        return value

    def close(self) -> None:
        """Stop every worker (asked first, then terminated) and reap it; closing twice is fine."""
        if self.closed:
            return
        self.closed = True
        for c in self._conns:
            try:
                c.send(None)
            except Exception:
                pass
        for p in self._procs:
            _reap(p, 0.2)
        for c in self._conns:
            c.close()
        if self in _open_owners:
            _open_owners.remove(self)


def open_owners() -> int:
    """How many ``Owners`` are open now (a mark for ``close_owners``)."""
    return len(_open_owners)


def close_owners(mark: int = 0) -> None:
    """Close the ``Owners`` opened since ``open_owners()`` gave ``mark`` (default: all)."""
    for o in _open_owners[mark:][::-1]:
        o.close()


def _owner(serve, share, conn, inherited) -> None:
    """A worker of ``Owners``: answer requests until told to stop or the parent is gone."""
    global _in_worker
    _in_worker = True
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    for c in inherited:  # the other workers' pipes: their ends must close when the parent's do
        c.close()
    _open_owners.clear()  # the parent's to close, not this copy's
    try:
        while True:
            try:
                request = conn.recv()
            except (EOFError, OSError):
                return
            if request is None:
                return
            try:
                reply = (True, serve(share, request))
            except Exception as exc:
                reply = (False, _portable(exc))
            try:
                conn.send(reply)
            except Exception as exc:  # an answer that does not pickle
                conn.send((False, _portable(exc)))
    finally:
        conn.close()
