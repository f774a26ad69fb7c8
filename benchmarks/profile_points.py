"""The profile-likelihood points of a fit's interval checks, traced (run by hand, never in tests).

    python benchmarks/profile_points.py NETWORK TESTS [--code DIR ...] [--reference]

Runs ``calib.calibration.fit`` without the report in a fresh process per ``--code`` tree (default:
this checkout), trees in turn, with ``CALIB_WORKERS=1`` so that every solve is seen in one
process. Prints per profile point (``estimate._profile_point``) the group, the value, the root of
its rise over the cut-off's root, its Gauss-Newton drop over the cut-off, and the snapshot
solves and sensitivity calls it took; per column the check and ends with their counts and CPU;
then the interval ends unrounded. ``--exact``: after each end, the cut-off's crossing of the
profile refitted tightly (as ``--reference``'s points), by secant steps to 1e-8 of the cut-off's
root. ``--reference``: every profile point refitted tightly instead
(``scipy.optimize.least_squares``, trf, xtol = ftol = gtol = 1e-10, up to 100 evaluations; its
drop 0): the same end search with (close to) exact conditional minima, the reference the search's
ends are compared with.
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
import sys, time
import numpy as np
from calib.calibration import estimate as E
import importlib
F = importlib.import_module("calib.calibration.fit")
from calib.calibration import read_tests
from calib.hydraulics import solver as S
from calib.network.io import read_network

net_dir, tests_dir, reference = sys.argv[1], sys.argv[2], sys.argv[3] == "1"
exact = sys.argv[4] == "1"
count = {"sens": 0}
sens = S.NetworkSolver.sensitivities
def counted_sens(self, *a, **k):
    count["sens"] += 1
    return sens(self, *a, **k)
S.NetworkSolver.sensitivities = counted_sens

def tight_point(problem, est, i, value, warm):
    S0 = float(est.residual @ est.residual)
    try:
        _rise, x = E._profile_rise(problem, est, i, value, warm, max_nfev=100, tol=1e-10)
    except TypeError:  # a tree from before session 23, whose refit settings are fixed
        sys.exit("--reference and --exact need estimate._profile_rise(max_nfev=, tol=) (main "
                 "from session 23 on)")
    free = np.flatnonzero(np.arange(len(x)) != i)
    r = problem.residuals(x)
    J = problem.jacobian(x)
    trace = np.zeros(len(x))
    if free.size:
        trace[free] = np.linalg.lstsq(J[:, free], -J[:, i], rcond=None)[0]
    trace[i] = 1.0
    return max(float(r @ r) - S0, 0.0), x, 2.0 * float(J[:, i] @ r), trace, 0.0

point = tight_point if reference else E._profile_point
def traced_point(problem, est, i, value, warm):
    n, s, t = problem.n_solves, count["sens"], time.process_time()
    out = point(problem, est, i, value, warm)
    rise, x, slope, trace, drop = out
    cut = est.t ** 2
    print("point\t%d\t%.6f\t%.5f\t%.5f\t%d\t%d\t%.3f" % (
        i, value, np.sqrt(rise / cut), drop / cut, problem.n_solves - n, count["sens"] - s,
        time.process_time() - t))
    return out
E._profile_point = traced_point

def exact_root(problem, est, i, value, cut):
    # the cut-off's crossing of the tightly refitted profile, by secant steps (reference only)
    rc, x = np.sqrt(cut), np.array(est.x, float)
    def g(v):
        nonlocal x
        rise, x, _s, _t, _d = tight_point(problem, est, i, v, x)
        return np.sqrt(rise) - rc
    a, b = value, value + 1e-3 * (value - est.x[i])
    ga, gb = g(a), g(b)
    for _ in range(10):
        if abs(gb) < 1e-8 * rc or gb == ga:
            break
        a, ga, b = b, gb, b - gb * (b - a) / (gb - ga)
        gb = g(b)
    return b

for name in ("linear_trustworthy", "_profile_end"):
    def wrap(f, name=name):
        def traced(problem, est, i, *a, **k):
            n, s, t = problem.n_solves, count["sens"], time.process_time()
            out = f(problem, est, i, *a, **k)
            print("%s\t%d\t%s\t%d\t%d\t%.3f" % (name, i, out if name != "_profile_end" else
                                                "%.8f %s %d" % out, problem.n_solves - n,
                                                count["sens"] - s, time.process_time() - t))
            if exact and name == "_profile_end" and not out[1]:
                print("exact\t%d\t%.8f" % (i, exact_root(problem, est, i, out[0], a[-1])))
            return out
        return traced
    setattr(E, name, wrap(getattr(E, name)))

network = read_network(net_dir)
tests = read_tests(tests_dir, network)
res = F.fit(network, tests)
np.set_printoptions(precision=10, linewidth=200)
print("answer\tC", res.c)
print("answer\tlow", res.c_low)
print("answer\thigh", res.c_high)
"""


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("network")
    ap.add_argument("tests")
    ap.add_argument("--code", action="append", default=None, help="code tree(s) to compare")
    ap.add_argument("--reference", action="store_true", help="points refitted tightly")
    ap.add_argument("--exact", action="store_true",
                    help="also each end's crossing of the tightly refitted profile (secant)")
    args = ap.parse_args(argv)
    trees = [Path(c).resolve() for c in (args.code or [str(HERE)])]
    network, tests = str(Path(args.network).resolve()), str(Path(args.tests).resolve())
    print(f"# {time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())}, load "
          f"{' '.join(f'{v:.2f}' for v in os.getloadavg())}")
    for code in trees:
        env = dict(os.environ, PYTHONPATH=str(code), CALIB_WORKERS="1")
        done = subprocess.run([sys.executable, "-c", _PROBE, network, tests,
                               "1" if args.reference else "0", "1" if args.exact else "0"],
                              env=env, cwd=str(code), capture_output=True, text=True)
        if done.returncode != 0:
            raise SystemExit(f"{code}: exited {done.returncode}:\n{done.stderr}")
        print(f"\n## {code}{' (reference: points refitted tightly)' if args.reference else ''}")
        print("point: group value root/rc drop/cut solves sensitivity-calls CPU")
        print(done.stdout, end="")
    print(f"# end {time.strftime('%H:%M UTC', time.gmtime())}, load "
          f"{' '.join(f'{v:.2f}' for v in os.getloadavg())}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
