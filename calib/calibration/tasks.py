"""The fit's independent work on a problem, shared between processes by ``calib.parallel``.

``on_problem(problem, task, items)``: ``[task(item) for item in items]`` where every task starts from
the state ``problem`` had when called: its attributes (the last solutions and the warm starts per
snapshot, shared with the fit's other problems, put back in place) and a solver holding no kept
factorization. So a task's numbers do not depend on the tasks before it nor on the process that
ran it, and the problem is left as it was, but for its counts of solves, solver calls and
iterations, which gain every task's. Used for the profile-likelihood interval ends and the
leave-one-out refits (a task of a few seconds on an 8,000-pipe network); the report's hydrant
curves use ``calib.parallel`` directly with their own solver.
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
    """Drop the kept factorizations of ``problem``'s solver and of its stacked solvers."""
    problem.solver.forget()
    if problem.stacks:
        from calib.hydraulics.stacked import stacked_solver
        for k in sorted({len(m) for m in problem.stacks}):
            stacked_solver(problem.solver, k).solver.forget()


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
        value, deltas, worker = out
        if worker and announce is not None:
            announce(i)
        for j, d in enumerate(deltas):
            n0 = base[j][0] + added[j][0]
            for c, dc in enumerate(d):
                added[j][c] += dc
            if worker and progress[j] is not None:  # solves here were reported as they came
                for k in range(d[0]):
                    progress[j](n0 + k + 1)

    if workers is None:
        workers = parallel.workers_for(problems[0].network)
    outs = parallel.run(one, items, reset=reset, workers=workers, done=done)
    for p, b0, a in zip(problems, base, added):
        for name, b, d in zip(_COUNTS, b0, a):
            setattr(p, name, b + d)
    return [value for value, _counts, _worker in outs]
