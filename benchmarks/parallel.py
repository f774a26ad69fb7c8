"""``calib fit`` with its report at one and two workers, against a reference tree (run by hand).

    python benchmarks/parallel.py [--base /tmp/main_base] [--repeats 3] [--cases demo,grid] [--default]
    python benchmarks/parallel.py --fit-phase [--grid FOLDER] [--repeats 3]

Runs, interleaved in each repeat so that all see the same load: the base tree (as it is), this
tree with ``CALIB_WORKERS=1`` (serial) and this tree with ``CALIB_WORKERS=2`` (two workers even
below ``calib.parallel.MIN_PIPES``), and with ``--default`` this tree without the variable. Prints per case the
median wall and CPU time (the command with its children: the report's figure worker and the fit's
worker processes) and the median of each phase line the command writes off a terminal
(``interval checks ...: 651 solves, 9.0 s``), with the solve counts, and the load average before
and after. The grid is ``benchmarks/cli_fit.py``'s (written once to a temporary folder, or
``--grid FOLDER`` holding network/ and tests/). The temporary folder is removed at the end.

``--fit-phase``: only the fit's evaluations (``fit_phase``), in this process, where the two
processes' CPU and waits can be seen apart (the demo town without ``--grid``).
"""

from __future__ import annotations

import argparse
import os
import re
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parents[1]
PHASE = re.compile(r"^([a-z][^:]*?)(?: \([^)]*\))?: (?:(\d+) solves, )?([\d.]+) s$")


def run_once(code: Path, workers: str | None, network: Path, tests: Path, out: Path):
    env = dict(os.environ, PYTHONPATH=str(code))
    env.pop("CALIB_WORKERS", None)
    if workers is not None:
        env["CALIB_WORKERS"] = workers
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    done = subprocess.run([sys.executable, "-m", "calib", "fit", str(network), str(tests), "--out",
                           str(out)], env=env, cwd=str(code), capture_output=True, text=True)
    elapsed = time.perf_counter() - t0
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if done.returncode != 0:
        raise SystemExit(f"{code}: exited {done.returncode}:\n{done.stderr}")
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    phases = {}
    for line in done.stderr.splitlines():
        m = PHASE.match(line.strip())
        if m:
            phases[m.group(1)] = (int(m.group(2) or 0), float(m.group(3)))
    return elapsed, cpu, phases


def _sched() -> tuple[float, float]:
    """This thread's time on a core and waiting for one (runnable) [s], from /proc."""
    run, wait = open("/proc/self/schedstat").read().split()[:2]
    return int(run) / 1e9, int(wait) / 1e9


def fit_phase(args) -> int:
    """The fit's least-squares evaluations (``estimate`` on the full readings, as ``calib fit``
    makes it first) in this process, at ``CALIB_WORKERS=1`` and ``=2`` in turn, each repeat with
    a fresh solver. Per run: wall, this process's CPU and its time waiting for a core (load),
    the time it waited for the worker's answers, the worker's CPU, solves and Newton iterations,
    and the critical path: this process's CPU with each request's own share replaced by the
    longer of its share and the worker's (CPU times sent back with the answers), i.e. the wall
    time with a core for each process and no cost to pass a request. On a loaded machine wall
    moves with the load; the CPU times and the critical path much less."""
    sys.path.insert(0, str(HERE))
    import numpy as np

    from calib import parallel
    from calib.calibration import read_tests, tasks
    from calib.calibration.estimate import estimate
    from calib.calibration.fit import FIT_TOLERANCES, _test_year
    from calib.calibration.groups import make_groups
    from calib.calibration.priors import group_prior
    from calib.calibration.problem import CalibrationProblem
    from calib.hydraulics import NetworkSolver
    from calib.network.io import read_network

    folder = Path(args.grid) if args.grid else HERE / "field_samples" / "tallowmere"
    net = read_network(folder / "network")
    tests = read_tests(folder / "tests", net)
    grouping = make_groups(net, None)
    prior = group_prior(net, grouping, _test_year(tests))
    # per request: this process's CPU from sending it to waiting for its answer (its own share)
    # and the worker's CPU on it, sent back beside the answer; their larger one, summed over the
    # requests, is what the requests would take with a core each ("critical path" below)
    waited = [0.0]
    pair = {"asked": 0.0, "mine": 0.0, "theirs": 0.0, "longer": 0.0}
    ask, answer, serve = parallel.Owners.ask, parallel.Owners.answer, tasks.SnapshotPool._serve

    def timed_ask(self, share, request):
        pair["asked"] = time.process_time()
        return ask(self, share, request)

    def timed_answer(self, share):
        mine = time.process_time() - pair["asked"]
        t = time.perf_counter()
        try:
            value, theirs = answer(self, share)
        finally:
            waited[0] += time.perf_counter() - t
        pair["mine"] += mine
        pair["theirs"] += theirs
        pair["longer"] += max(mine, theirs)
        return value

    def timed_serve(self, share, request):
        c = time.process_time()
        value = serve(self, share, request)
        return value, time.process_time() - c

    parallel.Owners.ask, parallel.Owners.answer = timed_ask, timed_answer
    tasks.SnapshotPool._serve = timed_serve
    print(f"{folder}: {net.n_pipes} pipes; load before: {os.getloadavg()}")
    seen: dict = {}
    for _ in range(args.repeats):
        for workers in ("1", "2"):
            os.environ["CALIB_WORKERS"] = workers
            prob = CalibrationProblem(net, tests, grouping, prior=prior,
                                      solver=NetworkSolver(net, **FIT_TOLERANCES))
            waited[0] = 0.0
            pair.update(mine=0.0, theirs=0.0, longer=0.0)
            kids = resource.getrusage(resource.RUSAGE_CHILDREN)
            run0, queue0 = _sched()
            t0 = time.perf_counter()

            @tasks.closing_pools
            def evaluations():
                return estimate(prob, prob.x0, "linear", 2.0, 60,
                                np.ones(tests.n_readings, dtype=bool))

            est = evaluations()
            wall = time.perf_counter() - t0
            run1, queue1 = _sched()
            after = resource.getrusage(resource.RUSAGE_CHILDREN)
            worker = (after.ru_utime - kids.ru_utime) + (after.ru_stime - kids.ru_stime)
            # with a core each: this process's CPU with its shares of the requests replaced by
            # the longer of its share and the worker's
            path = run1 - run0 - pair["mine"] + pair["longer"]
            row = (wall, run1 - run0, queue1 - queue0, waited[0], worker, path)
            seen.setdefault(workers, []).append(row + (est.x.tobytes(),))
            print(f"  {workers} worker(s): wall {wall:5.2f} s, this process CPU {row[1]:5.2f} s, "
                  f"waiting for a core {row[2]:5.2f} s, for the worker {row[3]:5.2f} s, worker "
                  f"CPU {worker:5.2f} s, critical path {path:5.2f} s; {prob.n_solves} solves, "
                  f"{prob.n_iterations} iterations", flush=True)
    for workers, rows in seen.items():
        med = [statistics.median(r[i] for r in rows) for i in range(6)]
        print(f"{workers} worker(s), median: wall {med[0]:.2f} s, CPU here {med[1]:.2f} s, "
              f"waiting for a core {med[2]:.2f} s, for the worker {med[3]:.2f} s, worker CPU "
              f"{med[4]:.2f} s, critical path {med[5]:.2f} s")
    same = len({r[6] for rows in seen.values() for r in rows}) == 1
    print("fitted parameters bit-identical in every run:", same)
    print("load after:", os.getloadavg())
    return 0


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--base", default="/tmp/main_base")
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--cases", default="demo,grid")
    ap.add_argument("--grid", default=None)
    ap.add_argument("--default", action="store_true", help="also this tree without CALIB_WORKERS")
    ap.add_argument("--fit-phase", action="store_true",
                    help="only the fit's evaluations, in this process, at 1 and 2 workers")
    args = ap.parse_args(argv)
    if args.fit_phase:
        return fit_phase(args)
    tmp = Path(tempfile.mkdtemp(prefix="calib-parallel-"))
    try:
        return _run(args, tmp)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)  # the outputs and the written grid


def _run(args, tmp: Path) -> int:
    cases = {}
    if "demo" in args.cases:
        demo = HERE / "field_samples" / "tallowmere"
        cases["demo"] = (demo / "network", demo / "tests")
    if "grid" in args.cases:
        if args.grid:
            cases["grid"] = (Path(args.grid) / "network", Path(args.grid) / "tests")
        else:
            sys.path.insert(0, str(HERE / "benchmarks"))
            from cli_fit import write_grid_case
            cases["grid"] = write_grid_case(tmp / "grid")
    variants = [("base", Path(args.base), None), ("this, 1 worker", HERE, "1"),
                ("this, 2 workers", HERE, "2")]
    if args.default:  # what a user gets: the cores decide, small networks stay serial
        variants.append(("this, default", HERE, None))
    print("load before:", os.getloadavg())
    for case, (network, tests) in cases.items():
        seen = {name: [] for name, _c, _w in variants}
        for r in range(args.repeats):
            for name, code, workers in variants:
                seen[name].append(run_once(code, workers, network, tests, tmp / f"{case}-{r}"))
        print(f"\n{case}: median of {args.repeats}")
        for name, runs in seen.items():
            wall = statistics.median(x[0] for x in runs)
            cpu = statistics.median(x[1] for x in runs)
            print(f"  {name:16s} wall {wall:6.2f} s  CPU {cpu:6.2f} s  "
                  f"(walls {', '.join(f'{x[0]:.2f}' for x in runs)})")
            for phase in runs[0][2]:
                vals = [x[2].get(phase, (0, float('nan'))) for x in runs]
                print(f"      {phase[:48]:48s} {vals[0][0]:5d} solves "
                      f"{statistics.median(v[1] for v in vals):6.2f} s")
    print("\nload after:", os.getloadavg())
    return 0


if __name__ == "__main__":
    sys.exit(main())
