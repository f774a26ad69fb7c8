"""The fit's independent work on a problem, shared between processes by ``calib.parallel``.

``on_problem(problem, task, items)``: ``[task(item) for item in items]`` where every task starts from
the state ``problem`` had when called: its attributes (the last solutions and the warm starts per
snapshot, shared with the fit's other problems, put back in place) and a solver holding no kept
factorization. So a task's numbers do not depend on the tasks before it nor on the process that
ran it, and the problem is left as it was, but for its counts of solves, solver calls and
iterations, which gain every task's. Used for the profile-likelihood interval ends and the
leave-one-out refits (a task of a few seconds on an 8,000-pipe network). ``problem_job``: the
same tasks as a ``calib.parallel.Job``; ``run_jobs`` runs several jobs in one run of tasks
(``fit``: the interval checks, the leave-one-out refits and the report's hydrant curves and
fire-flow rows, each job's tasks from its own state).

``SnapshotPool``: the fit's own evaluations, shared out by snapshot between processes that own
their snapshots across evaluations (``calib.parallel.Owners``), opened only inside a function
marked ``closing_pools`` (``fit``).
"""

from __future__ import annotations

from calib import parallel

_COUNTS = ("n_solves", "n_solver_calls", "n_iterations")


class _Kept:
    """The attributes of ``obj`` as they are now, to be put back: containers (dict, list, set)
    are put back in place too, since other objects may share them (the fit's warm starts), and
    so are the attributes of the calibration's own objects it holds (the solutions kept at the
    last few x, shared by the fit's problems)."""

    def __init__(self, obj, depth: int = 1):
        self.obj = obj
        self.attrs = dict(vars(obj))
        self.contents = {name: (dict(v) if isinstance(v, dict) else list(v) if isinstance(v, list)
                                else set(v))
                         for name, v in self.attrs.items() if isinstance(v, (dict, list, set))}
        self.inner = [_Kept(v, depth - 1) for v in self.attrs.values()
                      if depth > 0 and type(v).__module__.startswith("calib.calibration")
                      and hasattr(v, "__dict__")]

    def restore(self) -> None:
        for k in self.inner:
            k.restore()
        d = vars(self.obj)
        for name in [k for k in d if k not in self.attrs]:
            del d[name]
        d.update(self.attrs)
        for name, saved in self.contents.items():
            v = self.attrs[name]
            if isinstance(v, dict):
                v.clear()
                v.update(saved)
            elif isinstance(v, list):
                v[:] = saved
            else:
                v.clear()
                v.update(saved)


def forget_factors(problem) -> None:
    """Drop the kept factorizations of ``problem``'s solver, of its stacked solvers and of its
    snapshots' own solvers."""
    problem.solver.forget()
    for own in problem._recent.solvers or ():
        own.forget()
    if problem.stacks:
        from calib.hydraulics.stacked import stacked_solver
        for k in sorted({len(m) for m in problem.stacks}):
            stacked_solver(problem.solver, k).solver.forget()


def problem_job(problem, task, items, announce=None, finished=None, rank=0) -> parallel.Job:
    """``task(item)`` for each of ``items`` as a ``parallel.Job``, each from ``problem``'s state now
    (see the module docstring). ``problem`` may be a list of problems (e.g. one per leave-one-out
    refit, sharing warm starts and a solver): each keeps its own counts, which gain every task's
    when the run ends. Each problem's ``progress`` hears of the solves of a task run here as they
    come, of a worker's when its task ends (after ``announce(index)`` where given).
    ``finished(values)``: called once every task's value is in; ``rank``: ``parallel.Job``'s."""
    problems = list(problem) if isinstance(problem, (list, tuple)) else [problem]
    kept = [_Kept(p) for p in problems]
    progress = [p.progress for p in problems]
    base = [[getattr(p, name) for name in _COUNTS] for p in problems]
    added = [[0] * len(_COUNTS) for _ in problems]

    def reset():
        for k in kept:
            k.restore()
        for p in problems:
            forget_factors(p)

    def one(item):
        worker = parallel.in_worker()
        if worker:
            for p in problems:
                p.progress = None  # reported by ``done``, here, when the task ends
        value = task(item)
        return value, [[getattr(p, name) - b for name, b in zip(_COUNTS, b0)]
                       for p, b0 in zip(problems, base)], worker

    def done(i, out):
        _value, deltas, worker = out
        if worker and announce is not None:
            announce(i)
        for j, d in enumerate(deltas):
            n0 = base[j][0] + added[j][0]
            for c, dc in enumerate(d):
                added[j][c] += dc
            if worker and progress[j] is not None:  # solves here were reported as they came
                for k in range(d[0]):
                    progress[j](n0 + k + 1)

    def after(_outs):  # the counts, once ``reset`` has put the problems back for the last time
        for p, b0, a in zip(problems, base, added):
            for name, b, d in zip(_COUNTS, b0, a):
                setattr(p, name, b + d)

    return parallel.Job(one, items, reset=reset, done=done, finished=finished, after=after,
                        unwrap=lambda out: out[0], rank=rank)


def run_jobs(jobs, workers: int | None = None) -> list:
    """``parallel.run_jobs`` for the fit's work: the snapshots' pools closed first (the tasks
    solve in their own process, from forgotten factors), none opened while the tasks run."""
    global _tasks_running
    jobs = [j for j in jobs if j is not None]
    if any(job.items for job in jobs):
        parallel.close_owners()
    busy, _tasks_running = _tasks_running, True
    try:
        return parallel.run_jobs(jobs, workers=workers)
    finally:
        _tasks_running = busy


def on_problem(problem, task, items, workers: int | None = None, announce=None) -> list:
    """``[task(item) for item in items]``, each from ``problem``'s state at the call (see the module
    docstring), run by ``calib.parallel.run`` on up to ``workers`` processes (default
    ``parallel.workers_for`` the problem's network). ``problem`` may be a
    list of problems (e.g. one per leave-one-out refit, sharing warm starts and a solver): each
    keeps its own counts. Each problem's ``progress`` hears of the solves of a task run here as
    they come, of a worker's when its task ends (after ``announce(index)`` where given)."""
    problems = list(problem) if isinstance(problem, (list, tuple)) else [problem]
    items = list(items)
    if not items:
        return []
    if workers is None:
        workers = parallel.workers_for(problems[0].network)
    return run_jobs([problem_job(problems, task, items, announce=announce)], workers)[0]


# --- the snapshots of a fit's evaluations, owned by processes across evaluations -----------------
_tasks_running = False  # ``on_problem`` runs: its tasks solve in their own process
_scopes = 0  # ``closing_pools`` functions running: pools open only inside one


def closing_pools(func):
    """``func``, inside which ``SnapshotPool``s may open (nowhere else: a problem used on its
    own solves in this process), closed when it returns, also on an error or Ctrl-C (their
    worker processes stopped and reaped): put on ``fit``."""
    import functools

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        global _scopes
        mark = parallel.open_owners()
        _scopes += 1
        try:
            return func(*args, **kwargs)
        finally:
            _scopes -= 1
            parallel.close_owners(mark)
    return wrapper


def _shipped(result):
    """``result`` as it crosses to another process: without the key of the factorization kept
    beside it (that factorization stays with the solver that made it; another process's keys
    would name its own)."""
    import copy
    out = copy.copy(result)
    vars(out).pop("_factor_key", None)
    return out


class SnapshotPool:
    """The snapshots of a fit's problems (those sharing one store of solutions, ``share``) shared
    out between this process and worker processes that keep them from one evaluation to the next.

    Snapshot ``i`` is owned by share ``self.share[i]`` (0: this process): its solver (of its own,
    ``CalibrationProblem._owned_solvers``), its kept factorizations and its last solutions live
    there. An evaluation sends ``x`` and a tag of the solutions to warm-start from; each worker
    solves its snapshots and sends their solutions back (without their factorizations); the
    Jacobian's sensitivities are asked for the same way, by the solutions' tag. A worker that no
    longer holds the solutions asked for (it keeps those whose factorizations its solvers still
    keep, and the last two) says so and is sent them: a solution without its kept factorization
    is what its solver would start from anyway. So every snapshot's numbers are those of a
    serial run, to the last bit, at any number of processes (tested).

    Started (``start``) at the first solve of a store inside a ``closing_pools`` function
    (``fit``), where more than one process may work
    (``parallel.available_workers``, ``parallel.workers_for`` the network: from
    ``parallel.MIN_PIPES`` pipes, or as ``CALIB_WORKERS`` says), not while ``on_problem``'s tasks
    run (it closes every pool first: its tasks solve in their own process) nor inside a worker.
    Closed by ``closing_pools`` (``fit``) and by ``on_problem``. A worker's error reaches the
    caller as the serial run raises it (the first failing snapshot in order); a worker that dies
    raises ``Lost`` and the problem solves on here.
    """

    Lost = parallel.WorkerLost

    @classmethod
    def start(cls, problem):
        """A pool for ``problem``'s store, or None where it does not apply (see the class)."""
        if not _scopes or _tasks_running or not parallel.can_fork() or \
                not problem._owned_solvers():
            return None
        workers = parallel.workers_for(problem.network)
        n = parallel.available_workers() if workers is None else workers
        n = min(n, len(problem.pairs))
        return cls(problem, n) if n >= 2 else None

    def __init__(self, problem, n: int):
        pairs = problem.pairs
        self.share = self.deal(pairs, n)
        self.owned = [[i for i in range(len(pairs)) if self.share[i] == k] for k in range(n)]
        self.n = n
        self._problem = problem
        self._store: dict = {}  # in a worker: tag -> {snapshot: its solution there}
        self.owners = parallel.Owners(self._serve, n)

    @staticmethod
    def deal(pairs, n: int) -> list:
        """The share (process) of each snapshot ``(test, kind)``: dealt in turn, the residual
        snapshots (more flow, more iterations) first, then the static ones; snapshot 0 to this
        process (a first solve starts the others from its solution, solved first)."""
        order = [0] + sorted(range(1, len(pairs)), key=lambda i: (pairs[i][1] != "residual", i))
        share = [0] * len(pairs)
        for j, i in enumerate(order):
            share[i] = j % n
        return share

    @property
    def closed(self) -> bool:
        return self.owners.closed

    def close(self) -> None:
        self.owners.close()

    # --- this process's side ---------------------------------------------------------------
    def solve(self, *args) -> list:
        """``_solve``; on an error or Ctrl-C between a request and its answer the pool is closed
        (an answer left unread would answer the next request)."""
        try:
            return self._solve(*args)
        except BaseException:
            self.close()
            raise

    def sensitivities(self, *args) -> dict:
        """``_sensitivities``, closed on an error as ``solve``."""
        try:
            return self._sensitivities(*args)
        except BaseException:
            self.close()
            raise

    def _solve(self, problem, tag, roughness, snaps, warm) -> list:
        """The solutions of ``snaps`` (``CalibrationProblem._solve_owned``): each warm-started
        from ``warm`` (its own last solution, or the shared warm start), else from snapshot 0's,
        solved first, here. Counted on ``problem`` as a serial run counts them."""
        results = [None] * len(snaps)
        errors: dict = {}
        previous = problem._cache
        ship = previous is None or getattr(previous, "tag", None) is None
        if any(w is None for w in warm[1:]):  # a first solve: snapshot 0 first
            results[0] = problem._solve_snapshot(0, snaps[0], roughness, warm[0])
            warm = [w if w is not None or i == 0 else results[0] for i, w in enumerate(warm)]
            ship = True
        x = problem._x_now
        for k in range(1, self.n):
            if ship:
                self.owners.ask(k, ("solve", tag, x, None,
                                    [_shipped(warm[i]) for i in self.owned[k]]))
            else:
                self.owners.ask(k, ("solve", tag, x, previous.tag, None))
        for i in self.owned[0]:
            if results[i] is None:
                try:
                    results[i] = problem._solve_snapshot(i, snaps[i], roughness, warm[i])
                except Exception as exc:
                    errors[i] = exc
                    break
        for k in range(1, self.n):
            reply = self.owners.answer(k)
            if reply == "missing":
                self.owners.ask(k, ("solve", tag, x, None,
                                    [_shipped(warm[i]) for i in self.owned[k]]))
                reply = self.owners.answer(k)
            solved, error = reply
            for i, res in solved:
                results[i] = res
            if error is not None:
                errors[error[0]] = error[1]
        first = min(errors, default=len(snaps))
        for i in range(first):
            problem._count(snaps[i], results[i])
        if errors:
            raise errors[first]
        return results

    def _sensitivities(self, problem, results, need) -> dict:
        """dH/dp of the snapshots ``need`` at ``results`` (a ``_Solved`` of this store), each
        computed where its snapshot is owned."""
        theirs = {k: [si for si in need if self.share[si] == k] for k in range(1, self.n)}
        for k, some in theirs.items():
            if some:
                self.owners.ask(k, ("sens", results.tag, some, None))
        solvers = problem._owned_solvers()
        out = {si: problem._snapshot_dH(si, results[si], solvers[si])
               for si in need if self.share[si] == 0}
        for k, some in theirs.items():
            if not some:
                continue
            reply = self.owners.answer(k)
            if reply == "missing":
                self.owners.ask(k, ("sens", results.tag, some,
                                    {si: _shipped(results[si]) for si in some}))
                reply = self.owners.answer(k)
            out.update(reply)
        return out

    # --- a worker's side -----------------------------------------------------------------
    def _serve(self, share, request):
        kind, tag, *rest = request
        p = self._problem
        if kind == "solve":
            x, warm_tag, shipped = rest
            mine = self.owned[share]
            if shipped is None:
                held = self._store.get(warm_tag)
                if held is None or any(i not in held for i in mine):
                    return "missing"
                starts = [held[i] for i in mine]
            else:
                starts = shipped
            p._x_now = x
            roughness, snaps = p.roughness(x), p.snapshots(x)
            solved, error = {}, None
            for i, w in zip(mine, starts):
                try:
                    solved[i] = p._solve_snapshot(i, snaps[i], roughness, w)
                except Exception as exc:
                    error = (i, parallel._portable(exc))
                    break
            self._hold(tag, solved)
            return [(i, _shipped(r)) for i, r in solved.items()], error
        if kind == "sens":
            need, shipped = rest
            held = self._store.get(tag)
            if shipped is not None:
                held = self._hold(tag, shipped)
            elif held is None or any(si not in held for si in need):
                return "missing"
            solvers = p._recent.solvers
            out = {si: p._snapshot_dH(si, held[si], solvers[si]) for si in need}
            self._hold(tag, {})
            return out
        raise ValueError(f"unknown request {kind!r}")

    def _hold(self, tag, solved) -> dict:
        """Keep ``solved`` under ``tag`` (the most recent); drop the solutions, but the last two
        tags', whose factorizations their solvers no longer keep (sent again where needed)."""
        held = self._store.pop(tag, {})
        held.update(solved)
        self._store[tag] = held
        solvers = self._problem._recent.solvers
        for old in list(self._store)[:-2]:
            if all(getattr(r, "_factor_key", None) not in solvers[i]._kept
                   for i, r in self._store[old].items()):
                del self._store[old]
        return held
