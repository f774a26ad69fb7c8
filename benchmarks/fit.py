"""Benchmark of the calibration: Jacobian cost (analytic against finite differences) and a whole fit.

    python benchmarks/fit.py [--quick]

1. Jacobian of one problem (a 40 x 40 grid, about 3,100 pipes, 10 tests = 20 snapshots) for 5, 10 and
   20 groups: the analytic Jacobian (one factorization per snapshot for all columns) against central
   finite differences (2 p solves per snapshot), with the ratio and the largest difference.
2. A whole fit (least squares, intervals, flags, influence) of a generated ~8,000-pipe network
   (64 x 63 grid) with 20 tests and 5 groups; target at most 30 s on a 2-core machine.
3. ``--stacked``: the snapshots of a fit solved one by one against stacked as one block-diagonal
   network (``calib.hydraulics.stacked``): the same sequence of parameter vectors (residuals and
   Jacobian at each, as a fit's steps) on the demo town and on grids of growing size, both ways
   interleaved; counts (solver calls, Newton iterations), CPU and wall time, largest differences.
4. ``--fit-counts --code DIR [--code DIR ...] NETWORK TESTS``: the whole ``calib.calibration.fit`` of
   one case in a fresh process per code tree (e.g. a pristine main against this branch), trees
   interleaved: snapshot solves, solver calls, Newton iterations, factorizations, sensitivity
   solves (counted by wrapping ``NetworkSolver``'s public methods), CPU and wall time, the C.
Figures go into the "Fit" section of benchmarks/README.md. Synthetic data only (calib.calibration.synthetic).
"""

from __future__ import annotations

import argparse
import os
import platform
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from calib.calibration import fit  # noqa: E402
from calib.calibration.groups import make_groups  # noqa: E402
from calib.calibration.problem import CalibrationProblem  # noqa: E402
from calib.calibration.synthetic import grid_network, plan_tests, synthetic_tests  # noqa: E402
from calib.hydraulics import NetworkSolver  # noqa: E402


def jacobian_cost(nx: int, ny: int, n_tests: int, groups_list=(5, 10, 20)) -> list[dict]:
    rows = []
    for n_groups in groups_list:
        net = grid_network(nx, ny, n_groups=n_groups, seed=1)
        grp = make_groups(net)
        truth = np.linspace(70, 140, n_groups)[grp.index]
        solver = NetworkSolver(net)
        tests = synthetic_tests(net, truth, plan_tests(net, n_tests, seed=2), seed=3, solver=solver)
        prob = CalibrationProblem(net, tests, grp, solver=solver)
        x = prob.x0 * 0.95
        prob.solve(x)  # converged snapshots first; both Jacobians start from them
        t0 = time.perf_counter()
        J = prob.jacobian(x)
        t_an = time.perf_counter() - t0
        t0 = time.perf_counter()
        Jfd = prob.jacobian_fd(x)
        t_fd = time.perf_counter() - t0
        rel = float(np.max(np.abs(J - Jfd)) / np.max(np.abs(Jfd)))
        rows.append(dict(groups=n_groups, pipes=net.n_pipes, snapshots=len(prob.pairs),
                         analytic_s=t_an, fd_s=t_fd, ratio=t_fd / t_an, max_rel_diff=rel))
    return rows


def whole_fit(nx: int, ny: int, n_tests: int = 20, n_groups: int = 5) -> dict:
    net = grid_network(nx, ny, n_groups=n_groups, seed=5)
    grp = make_groups(net)
    tc = np.array([65.0, 85.0, 105.0, 125.0, 140.0])[:n_groups]  # the true C per group
    truth = tc[grp.index]
    solver = NetworkSolver(net)
    plan = plan_tests(net, n_tests, seed=6, flow_gpm=(1000.0, 1500.0))
    tests = synthetic_tests(net, truth, plan, seed=7, solver=solver)
    t0 = time.perf_counter()
    res = fit(net, tests, grouping=grp, prior="none", solver=NetworkSolver(net))
    elapsed = time.perf_counter() - t0
    covered = int(np.sum((res.c_low <= tc) & (tc <= res.c_high)))
    return dict(pipes=net.n_pipes, junctions=net.n_junctions, tests=n_tests, groups=n_groups,
                readings=tests.n_readings, seconds=elapsed, solves=res.n_solves,
                nfev=res.estimate.nfev, covered=covered, c=np.round(res.c, 1).tolist())


def _evaluations(prob, xs) -> tuple[dict, list, list]:
    """Residuals and Jacobian at each of ``xs``: counts and CPU/wall time of the first (a cold
    start, and a stack's set-up) and of the rest (warm starts, as most of a fit's evaluations)."""
    rs, Js, times = [], [], []
    for x in xs:
        c0, t0 = time.process_time(), time.perf_counter()
        rs.append(prob.residuals(x))
        Js.append(prob.jacobian(x))
        times.append((time.process_time() - c0, time.perf_counter() - t0))
        if len(times) == 1:
            first = (prob.n_solver_calls, prob.n_iterations)
    cpu0, wall0 = times[0]
    return dict(solves=prob.n_solves, calls=prob.n_solver_calls - first[0],
                iterations=prob.n_iterations - first[1], first_calls=first[0],
                first_iterations=first[1], first_cpu=cpu0, first_wall=wall0,
                cpu=sum(t[0] for t in times[1:]), wall=sum(t[1] for t in times[1:])), rs, Js


def stacked_cost(cases, variants=(False, None), rounds: int = 2) -> list[dict]:
    """Per case (name, network, tests, grouping): 8 evaluations (residuals and Jacobian) at
    parameters stepping towards a point 5 % below the start, for each ``stack`` variant of
    ``CalibrationProblem`` (False: one by one; an int: largest stack in pipes; None: the default),
    interleaved ``rounds`` times, the least CPU kept; a fresh solver each run (a stack's set-up
    is inside its time)."""
    rows = []
    for name, net, tests, grp in cases:
        best, out = {}, {}
        for _ in range(rounds):
            for v in variants:
                prob = CalibrationProblem(net, tests, grp, solver=NetworkSolver(net), stack=v)
                xs = [prob.x0 * f for f in (1.0, 0.97, 0.96, 0.955, 0.952, 0.951, 0.9502, 0.95)]
                row, rs, Js = _evaluations(prob, xs)
                row["stacks"] = [len(m) for m in prob.stacks]
                if v not in best or row["cpu"] < best[v]["cpu"]:
                    best[v] = row
                out[v] = (rs, Js)
        ref = out[variants[0]]
        for v in variants:
            dr = max(float(np.abs(a - b).max()) for a, b in zip(ref[0], out[v][0]))
            dj = max(float(np.abs(a - b).max() / np.abs(a).max()) for a, b in zip(ref[1], out[v][1]))
            rows.append(dict(case=name, pipes=net.n_pipes, snapshots=len(prob.pairs), variant=v,
                             max_resid_diff=dr, max_jac_rel_diff=dj, ratio=best[variants[0]]["cpu"]
                             / best[v]["cpu"], **best[v]))
    return rows


def stacked_cases(sizes) -> list:
    cases = []
    demo = Path(__file__).resolve().parents[1] / "field_samples" / "tallowmere"
    if (demo / "network").is_dir():
        from calib.calibration.tests_io import read_tests
        from calib.network.io import read_network
        net = read_network(demo / "network")
        cases.append(("demo town", net, read_tests(demo / "tests", net), make_groups(net)))
    for nx, ny, n_tests in sizes:
        net = grid_network(nx, ny, n_groups=5, seed=5)
        grp = make_groups(net)
        truth = np.array([65.0, 85.0, 105.0, 125.0, 140.0])[grp.index]
        plan = plan_tests(net, n_tests, seed=6, flow_gpm=(1000.0, 1500.0))
        cases.append((f"grid {nx} x {ny}", net, synthetic_tests(net, truth, plan, seed=7), grp))
    return cases


def main_stacked(quick: bool) -> None:
    sizes = [(12, 12, 10)] if quick else [(16, 16, 14), (24, 24, 14), (32, 32, 14), (45, 45, 14),
                                           (64, 63, 20)]
    variants = (False, None) if quick else (False, 4000, 8000, 16000, 10 ** 9)
    print("case | pipes | snapshots | stack limit [pipes] | stacks | first evaluation (cold, "
          "set-up): solver calls, Newton iterations, cpu s | next 7 (warm): solver calls, Newton "
          "iterations, cpu s, wall s | warm cpu ratio to one by one | max residual diff | max "
          "Jacobian rel diff")
    for r in stacked_cost(stacked_cases(sizes), variants):
        v = "one by one" if r["variant"] is False else "default" if r["variant"] is None else r["variant"]
        print(f"{r['case']} | {r['pipes']} | {r['snapshots']} | {v} | {r['stacks']} | "
              f"{r['first_calls']}, {r['first_iterations']}, {r['first_cpu']:.3f} | {r['calls']}, "
              f"{r['iterations']}, {r['cpu']:.3f}, {r['wall']:.3f} | {r['ratio']:.2f} | "
              f"{r['max_resid_diff']:.1e} | {r['max_jac_rel_diff']:.1e}", flush=True)


_FIT_COUNTS = r"""
import sys, time
import numpy as np
from calib.network.io import read_network
from calib.calibration.tests_io import read_tests
from calib.calibration import fit
from calib.hydraulics import NetworkSolver
n = dict(calls=0, iterations=0, factorizations=0, sensitivities=0)
solve, sens = NetworkSolver.solve, NetworkSolver.sensitivities
def counted_solve(self, *a, **k):
    r = solve(self, *a, **k)
    n["calls"] += 1; n["iterations"] += r.iterations; n["factorizations"] += r.factorizations
    return r
def counted_sens(self, *a, **k):
    n["sensitivities"] += 1
    return sens(self, *a, **k)
NetworkSolver.solve, NetworkSolver.sensitivities = counted_solve, counted_sens
net = read_network(sys.argv[1]); tests = read_tests(sys.argv[2], net)
c0, t0 = time.process_time(), time.perf_counter()
res = fit(net, tests, solver=NetworkSolver(net))
cpu, wall = time.process_time() - c0, time.perf_counter() - t0
print(f"snapshot solves {res.n_solves} | solver calls {n['calls']} | Newton iterations "
      f"{n['iterations']} | factorizations {n['factorizations']} | sensitivity solves "
      f"{n['sensitivities']} | cpu {cpu:.2f} s | wall {wall:.2f} s | C {np.round(res.c, 2).tolist()}")
"""


def fit_counts(codes, network, tests, rounds: int = 2) -> None:
    import subprocess
    for r in range(rounds):
        for code in codes:
            env = dict(os.environ, PYTHONPATH=str(Path(code).resolve()))
            out = subprocess.run([sys.executable, "-c", _FIT_COUNTS, str(Path(network).resolve()),
                                  str(Path(tests).resolve())], cwd=code, env=env, text=True,
                                 capture_output=True, check=True).stdout.strip()
            print(f"round {r + 1} | {code} | load {os.getloadavg()[0]:.1f} | {out}", flush=True)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true", help="smaller networks (a smoke run)")
    ap.add_argument("--stacked", action="store_true", help="only the stacked-snapshots comparison")
    ap.add_argument("--fit-counts", nargs=2, metavar=("NETWORK", "TESTS"),
                    help="whole fit of one case per --code tree: counts and times")
    ap.add_argument("--code", action="append", default=[], help="a code tree for --fit-counts")
    ap.add_argument("--rounds", type=int, default=2)
    args = ap.parse_args()
    if args.fit_counts:
        fit_counts(args.code or ["."], *args.fit_counts, rounds=args.rounds)
        return
    if args.stacked:
        print(f"machine: {platform.processor() or platform.machine()}, {os.cpu_count()} cores; "
              f"load {os.getloadavg()[0]:.2f}")
        main_stacked(args.quick)
        print(f"load after {os.getloadavg()[0]:.2f}")
        return
    print(f"machine: {platform.processor() or platform.machine()}, {os.cpu_count()} cores, "
          f"Python {platform.python_version()}, numpy {np.__version__}")
    if args.quick:
        jac = jacobian_cost(12, 12, 4)
        whole = whole_fit(20, 20, 6)
    else:
        jac = jacobian_cost(40, 40, 10)
        whole = whole_fit(64, 63, 20)
    print("Jacobian: groups | pipes | snapshots | analytic s | finite differences s | ratio | max rel diff")
    for r in jac:
        print(f"{r['groups']:3d} | {r['pipes']} | {r['snapshots']} | {r['analytic_s']:.3f} | "
              f"{r['fd_s']:.3f} | {r['ratio']:.1f} | {r['max_rel_diff']:.1e}")
    print(f"whole fit: {whole['pipes']} pipes, {whole['junctions']} junctions, {whole['tests']} tests, "
          f"{whole['groups']} groups, {whole['readings']} readings: {whole['seconds']:.1f} s, "
          f"{whole['solves']} solves, {whole['nfev']} evaluations, truth inside {whole['covered']}/"
          f"{whole['groups']} intervals, C {whole['c']}")


if __name__ == "__main__":
    main()
