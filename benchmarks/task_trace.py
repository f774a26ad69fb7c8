"""Where the tasks of ``calib.parallel`` run in ``calib fit`` (run by hand, never in tests).

    python benchmarks/task_trace.py TREE LOG fit NETWORK TESTS --out OUT [options]
    python benchmarks/task_trace.py --show LOG [LOG ...]

The first form runs ``python -m calib`` with ARGS on the code of TREE, with ``calib.parallel.run``
wrapped so that each task writes a line to LOG (JSON: which run of tasks, its item, the process,
its start and end since the command started, its CPU time), each run of tasks one line, the
progress phases (as ``calib fit`` prints them) and the exit. The second prints, per log, each run
of tasks with the CPU of its tasks per process (the longer share is what the run needs with both
cores free), the wall of the run, and the totals. Run it from /tmp so that the cwd does not
shadow TREE.
"""

from __future__ import annotations

import collections
import json
import os
import sys
import time


def _trace(tree: str, log: str, args: list[str]) -> None:
    sys.path.insert(0, tree)
    t_start = time.time()
    fd = os.open(log, os.O_WRONLY | os.O_CREAT | os.O_TRUNC | os.O_APPEND)

    def note(**kw):  # one write per line: the processes' lines do not interleave
        os.write(fd, (json.dumps(kw) + "\n").encode())

    from calib import parallel
    inner = parallel.run

    def run(task, items, reset=None, workers=None, done=None):
        items = list(items)
        name, t_call = getattr(task, "__qualname__", str(task)), time.time() - t_start

        def timed(item):
            t, c = time.time() - t_start, time.process_time()
            try:
                return task(item)
            finally:
                note(kind="task", name=name, item=repr(item)[:40], pid=os.getpid(), t0=t,
                     t1=time.time() - t_start, cpu=time.process_time() - c)
        try:
            return inner(timed, items, reset=reset, workers=workers, done=done)
        finally:
            note(kind="run", name=name, n=len(items), t0=t_call, t1=time.time() - t_start,
                 pid=os.getpid())
    parallel.run = run
    import calib.cli.fit as cf
    inner_log = cf.ProgressBar._log

    def _log(self, n, stage):
        phase = str(stage).partition(":")[0].strip()
        if phase != self._phase:
            note(kind="phase", name=phase, t=time.time() - t_start, cpu=time.process_time())
        inner_log(self, n, stage)
    cf.ProgressBar._log = _log
    import atexit
    import runpy
    atexit.register(lambda: note(kind="exit", t=time.time() - t_start, cpu=time.process_time()))
    sys.argv = ["calib"] + args
    runpy.run_module("calib", run_name="__main__", alter_sys=True)


def _show(logs: list[str]) -> None:
    for path in logs:
        rows = [json.loads(line) for line in open(path)]
        tasks = [r for r in rows if r["kind"] == "task"]
        longest = total = 0.0
        lines = []
        for run in (r for r in rows if r["kind"] == "run"):
            per = collections.Counter()
            for t in tasks:
                if t["name"] == run["name"] and run["t0"] - 1e-3 <= t["t0"] <= run["t1"]:
                    per[t["pid"]] += t["cpu"]
            longest += max(per.values(), default=0.0)
            total += sum(per.values())
            lines.append(f"  {run['name'][:30]}: {run['n']} tasks, CPU per process "
                         f"{' / '.join(f'{v:.2f}' for v in per.values())} s, "
                         f"wall {run['t1'] - run['t0']:.2f} s")
        end = next((r["t"] for r in rows if r["kind"] == "exit"), float("nan"))
        print(f"{path}: task CPU {total:.2f} s, longer shares summed {longest:.2f} s, "
              f"exit {end:.2f} s")
        print("\n".join(lines))


if __name__ == "__main__":
    if len(sys.argv) > 2 and sys.argv[1] == "--show":
        _show(sys.argv[2:])
    elif len(sys.argv) > 3:
        _trace(sys.argv[1], sys.argv[2], sys.argv[3:])
    else:
        raise SystemExit(__doc__)
