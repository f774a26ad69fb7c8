"""Benchmark of the calibration: Jacobian cost (analytic against finite differences) and a whole fit.

    python benchmarks/fit.py [--quick]

1. Jacobian of one problem (a 40 x 40 grid, about 3,100 pipes, 10 tests = 20 snapshots) for 5, 10 and
   20 groups: the analytic Jacobian (one factorization per snapshot for all columns) against central
   finite differences (2 p solves per snapshot), with the ratio and the largest difference.
2. A whole fit (least squares, intervals, flags, influence) of a generated ~8,000-pipe network
   (64 x 63 grid) with 20 tests and 5 groups; target at most 30 s on a 2-core machine.
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


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true", help="smaller networks (a smoke run)")
    args = ap.parse_args()
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
