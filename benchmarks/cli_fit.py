"""Wall time of ``python -m calib fit`` with its report, as a user runs it (run by hand, never in tests).

    python benchmarks/cli_fit.py [--code DIR ...] [--repeats 3] [--quick] [--cases help,demo,grid]
                                 [--outside] [--timeline]

Cases: the demo town (field_samples/tallowmere) and a generated 64 x 63 grid (7,938 pipes, 5 groups,
20 tests with two gauges each, handbook prior; base demand 0.03 L/s per junction, source 90 m), written once as a network folder and a tests folder.
Each ``--code`` tree (default: this checkout) runs the same command in a fresh process with
PYTHONPATH set to it, in turn, so that trees compared in one run see the same load. Prints the
median wall time (and CPU time of the command with its children) per tree and case, and the
import time alone (``python -c "import calib.cli"`` is
not enough: ``--help`` of the fit command is timed, which loads what the command line loads).
``--outside`` also splits each fit command into the fit itself (``calib.calibration.fit``, timed
inside the process: wall and CPU, less the report's ``prepare`` where the fit calls it) and
everything outside it (imports, reading the inputs, exports, the report with its figure worker,
exit): outside = whole command - fit, wall and CPU (the worker's CPU included).
``--timeline`` prints, per tree and case, when each step of the command ends, in seconds from the
moment the process was started (median over the repeats, wall and the main process's CPU):
interpreter up, imports, inputs read, each phase of the fit as the progress lines name it, the
report data, each figure's PNG back from the figure worker, the outputs written, the worker ended,
atexit, and the exit as the parent sees it.
The grid is invented (calib.calibration.synthetic); no real network.
"""

from __future__ import annotations

import argparse
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parents[1]


def write_grid_case(folder: Path, nx: int = 64, ny: int = 63, n_tests: int = 20) -> tuple[Path, Path]:
    sys.path.insert(0, str(HERE))
    from calib.calibration.groups import make_groups
    from calib.calibration.synthetic import (grid_network, plan_tests, synthetic_tests,
                                             write_tests_folder)
    from calib.network.io import write_network_tables

    # a lighter base demand and a higher source than the in-memory benchmark's, so every
    # reading is a plausible gauge pressure (47-108 psi) that the tests reader accepts
    net = grid_network(nx, ny, n_groups=5, seed=5, demand=0.03e-3, source_head=90.0)
    grp = make_groups(net)
    truth = np.array([65.0, 85.0, 105.0, 125.0, 140.0])[grp.index]
    plan = plan_tests(net, n_tests, seed=6, flow_gpm=(1000.0, 1500.0))
    tests = synthetic_tests(net, truth, plan, seed=7)
    write_network_tables(net, folder / "network")
    write_tests_folder(tests, net, folder / "tests")
    return folder / "network", folder / "tests"


def wall(code: Path, args: list[str]) -> tuple[float, float]:
    """(wall time, CPU time of the process and its children such as the report's figure worker) [s]."""
    env = dict(os.environ, PYTHONPATH=str(code))
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    done = subprocess.run([sys.executable, "-m", "calib", *args], env=env, cwd=str(code),
                          capture_output=True, text=True)
    elapsed = time.perf_counter() - t0
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if done.returncode != 0:
        raise SystemExit(f"{code}: calib {' '.join(args)} exited {done.returncode}:\n{done.stderr}")
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return elapsed, cpu


# Runs ``python -m calib ARGS`` with ``calib.calibration.fit`` timed (wall, CPU of this process) and
# written to the file named by CALIB_BENCH_FIT; the CLI looks the function up on the package when
# it runs, so the wrapper sees the same call. Importing the package first moves no cost out of the
# command: the command imports it anyway.
_SPLIT = """
import os, runpy, sys, time
import calib.calibration as cc
import calib.calibration.report as cr
inner, spent = cc.fit, [0.0, 0.0]
def fit(*a, **k):
    w, c = time.perf_counter(), time.process_time()
    try:
        return inner(*a, **k)
    finally:
        with open(os.environ["CALIB_BENCH_FIT"], "w") as fh:
            fh.write(f"{time.perf_counter() - w - spent[0]} {time.process_time() - c - spent[1]}")
cc.fit = fit
if hasattr(cr, "prepare"):  # the report's own work, called from inside the fit: not the fit's
    inner_prepare = cr.prepare
    def prepare(*a, **k):
        w, c = time.perf_counter(), time.process_time()
        try:
            return inner_prepare(*a, **k)
        finally:
            spent[0] += time.perf_counter() - w
            spent[1] += time.process_time() - c
    cr.prepare = prepare
sys.argv = ["calib"] + sys.argv[1:]
runpy.run_module("calib", run_name="__main__", alter_sys=True)
"""


# Runs ``python -m calib ARGS`` with marks (wall since CALIB_BENCH_T0, CPU of this process) at the
# end of each step, written as JSON to the file named by CALIB_BENCH_TIMELINE at exit. Wrappers
# only: the command runs its own code.
_TIMELINE = """
import atexit, json, os, sys, time
T0 = float(os.environ["CALIB_BENCH_T0"])
marks = []
def mark(what):
    marks.append((what, time.time() - T0, time.process_time()))
mark("interpreter up")
import runpy
import calib.cli.fit as cf
from calib import figure_worker
def wrap(owner, name, label):
    inner = getattr(owner, name)
    def f(*a, **k):
        try:
            return inner(*a, **k)
        finally:
            mark(label)
    setattr(owner, name, f)
inner_run = cf._run
def _run(*a, **k):
    mark("command line parsed, worker started")
    import calib.calibration as cc, calib.network.io as nio, calib.calibration.export as ex
    import calib.calibration.report as cr
    mark("imports")
    wrap(nio, "read_network", "network read")
    wrap(cc, "read_tests", "tests read")
    wrap(cc, "fit", "fit call returned")
    wrap(cr, "prepare", "report data (prepare)")
    wrap(ex, "write_outputs", "exports written")
    wrap(cr, "write_report", "report written")
    return inner_run(*a, **k)
cf._run = _run
inner_log = cf.ProgressBar._log
def _log(self, n, stage):
    phase = str(stage).partition(":")[0].strip()
    if phase != self._phase and self._phase is not None:
        mark("fit phase: " + self._phase)
    inner_log(self, n, stage)
cf.ProgressBar._log = _log
inner_close = cf.ProgressBar.close
def close(self):
    if self._phase is not None and not self.tty:
        mark("fit phase: " + self._phase)
    inner_close(self)
cf.ProgressBar.close = close
inner_result = figure_worker.FigureWorker.result
def result(self, name):
    try:
        return inner_result(self, name)
    finally:
        mark("figure back: " + name)
figure_worker.FigureWorker.result = result
wrap(figure_worker.FigureWorker, "close", "worker ended")
def dump():
    mark("atexit")
    with open(os.environ["CALIB_BENCH_TIMELINE"], "w") as fh:
        json.dump(marks, fh)
atexit.register(dump)
sys.argv = ["calib"] + sys.argv[1:]
runpy.run_module("calib", run_name="__main__", alter_sys=True)
"""


def timeline(code: Path, args: list[str]) -> list[tuple[str, float, float]]:
    """[(step, wall since the start [s], CPU of the main process [s])], the last the exit."""
    env = dict(os.environ, PYTHONPATH=str(code))
    with tempfile.NamedTemporaryFile("r", suffix=".json") as note:
        env["CALIB_BENCH_TIMELINE"] = note.name
        env["CALIB_BENCH_T0"] = repr(time.time())
        t0 = time.perf_counter()
        done = subprocess.run([sys.executable, "-c", _TIMELINE, *args], env=env, cwd=str(code),
                              capture_output=True, text=True)
        elapsed = time.perf_counter() - t0
        if done.returncode != 0:
            raise SystemExit(f"{code}: calib {' '.join(args)} exited {done.returncode}:\n{done.stderr}")
        import json
        marks = [tuple(m) for m in json.loads(Path(note.name).read_text())]
    return marks + [("exit seen by the parent", elapsed, float("nan"))]


def split(code: Path, args: list[str]) -> tuple[float, float, float, float]:
    """(wall, CPU) of the whole command and (wall, CPU) of its fit call [s]."""
    env = dict(os.environ, PYTHONPATH=str(code))
    with tempfile.NamedTemporaryFile("r", suffix=".txt") as note:
        env["CALIB_BENCH_FIT"] = note.name
        before = resource.getrusage(resource.RUSAGE_CHILDREN)
        t0 = time.perf_counter()
        done = subprocess.run([sys.executable, "-c", _SPLIT, *args], env=env, cwd=str(code),
                              capture_output=True, text=True)
        elapsed = time.perf_counter() - t0
        after = resource.getrusage(resource.RUSAGE_CHILDREN)
        if done.returncode != 0:
            raise SystemExit(f"{code}: calib {' '.join(args)} exited {done.returncode}:\n{done.stderr}")
        fit_wall, fit_cpu = (float(v) for v in Path(note.name).read_text().split())
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return elapsed, cpu, fit_wall, fit_cpu


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--code", action="append", default=None, help="code tree(s) to compare")
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--quick", action="store_true", help="a 20 x 20 grid with 6 tests")
    ap.add_argument("--cases", default="help,demo,grid",
                    help="which cases, comma-separated: help, demo, grid (default all three)")
    ap.add_argument("--outside", action="store_true",
                    help="split each fit into the fit call and the rest (imports, inputs, report)")
    ap.add_argument("--timeline", action="store_true",
                    help="when each step of the fit command ends (instead of the table of times)")
    args = ap.parse_args(argv)
    trees = [Path(c).resolve() for c in (args.code or [str(HERE)])]
    print(f"# {time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())}, load "
          f"{' '.join(f'{v:.2f}' for v in os.getloadavg())}")
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        grid_net, grid_tests = (write_grid_case(tmp, 20, 20, 6) if args.quick
                                else write_grid_case(tmp))
        demo = HERE / "field_samples" / "tallowmere"
        cases = {"imports (fit --help)": ["fit", "--help"],
                 "demo town fit + report": [str(demo / "network"), str(demo / "tests")],
                 "grid fit + report": [str(grid_net), str(grid_tests)]}
        wanted = {w.strip() for w in args.cases.split(",")}
        cases = {name: case for (name, case), key in zip(cases.items(), ("help", "demo", "grid"))
                 if key in wanted}
        if args.timeline:
            _timelines(trees, cases, args.repeats, tmp)
            print(f"# load at the end {' '.join(f'{v:.2f}' for v in os.getloadavg())}")
            return 0
        print("| case | " + " | ".join(str(t) for t in trees) + " |")
        print("|---|" + "---|" * len(trees))
        for name, case in cases.items():
            times = {t: [] for t in trees}
            cpus = {t: [] for t in trees}
            outs = {t: [] for t in trees}  # (wall, CPU) outside the fit call
            for r in range(args.repeats):
                for t in trees:  # interleaved: each tree sees the same load
                    extra = [] if case[0] == "fit" else ["--out", str(tmp / f"out{r}"), "--quiet"]
                    cmd = case if case[0] == "fit" else ["fit", *case, *extra]
                    if args.outside and case[0] != "fit":
                        w, c, fw, fc = split(t, cmd)
                        outs[t].append((w - fw, c - fc))
                    else:
                        w, c = wall(t, cmd)
                    times[t].append(w)
                    cpus[t].append(c)
            # wall: median (range); CPU of the process and its children, median: on a shared
            # machine a command with a worker process also gets a larger share of the cores
            print(f"| {name} | " + " | ".join(f"{statistics.median(times[t]):.2f} s "
                                               f"({min(times[t]):.2f}-{max(times[t]):.2f}), "
                                               f"CPU {statistics.median(cpus[t]):.2f} s"
                                               for t in trees) + " |", flush=True)
            if outs[trees[0]]:
                print(f"| {name}: outside the fit call | " + " | ".join(
                    f"{statistics.median(o[0] for o in outs[t]):.2f} s "
                    f"({min(o[0] for o in outs[t]):.2f}-{max(o[0] for o in outs[t]):.2f}), "
                    f"CPU {statistics.median(o[1] for o in outs[t]):.2f} s" for t in trees) + " |",
                    flush=True)
    print(f"# load at the end {' '.join(f'{v:.2f}' for v in os.getloadavg())}")
    return 0


def _timelines(trees, cases, repeats, tmp) -> None:
    """Print each fit case's timeline per tree: median wall and CPU at the end of each step."""
    for name, case in cases.items():
        if case[0] == "fit":
            continue  # --help has no steps
        runs = {t: [] for t in trees}
        for r in range(repeats):
            for t in trees:  # interleaved
                runs[t].append(timeline(t, ["fit", *case, "--out", str(tmp / f"out{r}")]))
        print(f"\n{name}: end of each step, s from the process start, median of {repeats} "
              "(wall / CPU of the main process)")
        print("| step | " + " | ".join(str(t) for t in trees) + " |")
        print("|---|" + "---|" * len(trees))
        steps = list(dict.fromkeys(m[0] for t in trees for run in runs[t] for m in run))
        for step in steps:
            cells = []
            for t in trees:
                at = [next((m for m in run if m[0] == step), None) for run in runs[t]]
                at = [m for m in at if m is not None]
                if not at:
                    cells.append("-")
                    continue
                w = statistics.median(m[1] for m in at)
                c = statistics.median(m[2] for m in at)
                cells.append(f"{w:.2f}" + ("" if c != c else f" / {c:.2f}"))
            print(f"| {step} | " + " | ".join(cells) + " |", flush=True)


if __name__ == "__main__":
    raise SystemExit(main())
