"""Work of each phase of a calibration fit, counted (run by hand, never in tests).

    python benchmarks/after_fit.py NETWORK TESTS [--code DIR ...] [--repeats 1] [--no-report]

Runs ``calib.calibration.fit`` (with the report's data, ``report.prepare`` without figures, from
the fit's ``on_result`` as ``calib fit`` does) in a fresh process per ``--code`` tree (default:
this checkout), trees in turn, with ``CALIB_WORKERS=1`` so that every solve is seen and counted
in one process. Per phase (the fit's own stage names; the report data in two parts, the hydrant
curves and the fire-flow rows): evaluations of the snapshots (``CalibrationProblem.solve`` calls
that solved), snapshot solves, solver calls (a stacked solve of K snapshots counts once), Newton iterations,
sensitivity calls, and the CPU time of the phase. The counts do not depend on the machine's
load; the CPU time does a little. Also prints the fitted C and interval ends unrounded, and the
flags and influence notes, so that two trees' answers can be compared digit by digit.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parents[1]

_PROBE = r"""
import collections, importlib, sys, time
import numpy as np
net_dir, tests_dir, with_report = sys.argv[1], sys.argv[2], sys.argv[3] == "1"
fit_module = importlib.import_module("calib.calibration.fit")
from calib.calibration import read_tests
from calib.calibration import problem as P
from calib.hydraulics import solver as S
from calib.network.io import read_network

stats = collections.defaultdict(collections.Counter)
cpu = collections.Counter()
now = {"stage": "set-up", "t": time.process_time()}

def enter(stage):
    t = time.process_time()
    cpu[now["stage"]] += t - now["t"]
    now["stage"], now["t"] = stage.split(":")[0], t

solve, sens = S.NetworkSolver.solve, S.NetworkSolver.sensitivities
def counted_solve(self, *a, **k):
    r = solve(self, *a, **k)
    s = stats[now["stage"]]; s["solver calls"] += 1; s["iterations"] += r.iterations
    return r
def counted_sens(self, *a, **k):
    stats[now["stage"]]["sensitivity calls"] += 1
    return sens(self, *a, **k)
S.NetworkSolver.solve, S.NetworkSolver.sensitivities = counted_solve, counted_sens
psolve = P.CalibrationProblem.solve
def counted_psolve(self, x):
    n = self.n_solves
    r = psolve(self, x)
    if self.n_solves > n:
        s = stats[now["stage"]]; s["evaluations"] += 1; s["snapshot solves"] += self.n_solves - n
    return r
P.CalibrationProblem.solve = counted_psolve

network = read_network(net_dir)
tests = read_tests(tests_dir, network)

def on_result(result):
    # what ``report.prepare`` does, in its two parts: the figures' data with the hydrant curves,
    # then the fire-flow section
    if with_report:
        from calib.calibration import report
        from calib.fireflow.fitsummary import html_section
        enter("report data, hydrant curves")
        report._plot_specs(result, "us")
        enter("report data, fire-flow rows")
        html_section(result, "us")
    enter("leave-one-out")

enter("fit")
res = fit_module.fit(network, tests, progress=lambda n, stage: enter(stage), on_result=on_result)
enter("end")
keys = ("evaluations", "snapshot solves", "solver calls", "iterations", "sensitivity calls")
total = collections.Counter()
for stage, s in stats.items():
    if stage == "set-up":
        continue
    total.update(s)
    print("phase\t%s\t%s\t%.3f" % (stage, "\t".join(str(s[k]) for k in keys), cpu[stage]))
print("phase\ttotal\t%s\t%.3f" % ("\t".join(str(total[k]) for k in keys),
                                  sum(v for k, v in cpu.items() if k not in ("set-up", "end"))))
np.set_printoptions(precision=10, linewidth=200)
print("answer\tC", res.c)
print("answer\tlow", res.c_low)
print("answer\thigh", res.c_high)
print("answer\tflags", [f for f in res.flag if f])
print("answer\tinfluence", [f for f in res.influence if f])
"""

KEYS = ("evaluations", "snapshot solves", "solver calls", "iterations", "sensitivity calls")


def run(code: Path, network: str, tests: str, report: bool) -> tuple[list, list]:
    env = dict(os.environ, PYTHONPATH=str(code), CALIB_WORKERS="1")
    done = subprocess.run([sys.executable, "-c", _PROBE, network, tests, "1" if report else "0"],
                          env=env, cwd=str(code), capture_output=True, text=True)
    if done.returncode != 0:
        raise SystemExit(f"{code}: exited {done.returncode}:\n{done.stderr}")
    lines = [ln.split("\t") for ln in done.stdout.splitlines()]
    return [ln[1:] for ln in lines if ln[0] == "phase"], [ln[1:] for ln in lines if ln[0] == "answer"]


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("network")
    ap.add_argument("tests")
    ap.add_argument("--code", action="append", default=None, help="code tree(s) to compare")
    ap.add_argument("--repeats", type=int, default=1)
    ap.add_argument("--no-report", action="store_true", help="leave out the report's data")
    args = ap.parse_args(argv)
    trees = [Path(c).resolve() for c in (args.code or [str(HERE)])]
    network, tests = str(Path(args.network).resolve()), str(Path(args.tests).resolve())
    print(f"# {time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())}, load "
          f"{' '.join(f'{v:.2f}' for v in os.getloadavg())}")
    for k in range(args.repeats):
        for code in trees:  # trees in turn: the same load for each
            phases, answers = run(code, network, tests, not args.no_report)
            print(f"\n## {code} (run {k + 1})")
            print(f"{'phase':52s} " + " ".join(f"{h:>17s}" for h in KEYS) + "   CPU [s]")
            for stage, *values, t in phases:
                print(f"{stage:52s} " + " ".join(f"{v:>17s}" for v in values) + f"   {float(t):7.2f}")
            for what, *value in answers:
                print(what, *value)
    print(f"# end {time.strftime('%H:%M UTC', time.gmtime())}, load "
          f"{' '.join(f'{v:.2f}' for v in os.getloadavg())}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
