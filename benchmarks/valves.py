"""Benchmark: time per solver iteration on the benchmark grids with and without control valves
(run by hand, never in the test suite).

    python benchmarks/valves.py [--sizes 71,159] [--every 300] [--repeats 5] [--code DIR]

The grids of ``benchmarks/solver.py``; every ``--every``-th pipe (by position, mains excluded) is
replaced by a control valve of its diameter, the types in turn: a reducing valve set 1 m below the
grade its downstream node has without valves, a throttle with K = 10, a flow-limiting valve set at
80 % of the pipe's flow without valves, a sustaining valve set 1 m above its upstream node's grade.
Prints, for the grid without and with valves, the median solve time, iterations,
factorizations, time per iteration and the median of the per-repeat ratios (the two solves of a
repeat run one after the other, so that both see the same load on a shared machine), and the valve
states; once with the solver's reuse of an older factorization (the default: how many iterations
refactor depends on how many links changed much) and once with a factorization at every iteration
(the cost of an iteration itself). ``--code DIR`` times the solver of another checkout (e.g. main)
with this same script. The data are invented; no real network.
"""

from __future__ import annotations

import argparse
import os
import platform
import statistics
import sys
import time
from pathlib import Path

import numpy as np

_code = sys.argv[sys.argv.index("--code") + 1] if "--code" in sys.argv else None
sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(_code).resolve() if _code else Path(__file__).resolve().parents[1]))

from solver import square_grid  # noqa: E402

from calib.hydraulics import NetworkSolver  # noqa: E402
from calib.network.model import ValveMode, Valves, ValveType  # noqa: E402
from calib.units import GAMMA_WATER  # noqa: E402


def with_valves(net, every: int):
    """The grid with every ``every``-th ordinary pipe turned into a valve (see the module doc)."""
    base = NetworkSolver(net).solve()
    candidates = np.flatnonzero((net.diameter < 0.5) & (net.pipe_from < net.n_junctions)
                                & (net.pipe_to < net.n_junctions))
    chosen = candidates[every // 2::every]
    q = base.flow[chosen]
    # orient each valve along the flow without valves
    frm = np.where(q >= 0, net.pipe_from[chosen], net.pipe_to[chosen])
    to = np.where(q >= 0, net.pipe_to[chosen], net.pipe_from[chosen])
    kinds = np.resize([ValveType.REDUCING, ValveType.THROTTLE, ValveType.FLOW_LIMITING,
                       ValveType.SUSTAINING], len(chosen)).astype(int)
    elev = net.elevation
    setting = np.select(
        [kinds == ValveType.REDUCING, kinds == ValveType.THROTTLE,
         kinds == ValveType.FLOW_LIMITING],
        [(base.head[to] - 1.0 - elev[to]) * GAMMA_WATER, 10.0, 0.8 * np.abs(q)],
        (base.head[frm] + 1.0 - elev[frm]) * GAMMA_WATER)
    keep = np.setdiff1d(np.arange(net.n_pipes), chosen)
    valves = Valves(ids=np.array([f"V{i}" for i in range(len(chosen))], dtype=object),
                    from_node=frm, to_node=to, diameter=net.diameter[chosen], kind=kinds,
                    setting=setting, mode=np.full(len(chosen), int(ValveMode.ACTIVE)),
                    minor_loss=np.full(len(chosen), 0.5))
    return net.replace(pipe_ids=net.pipe_ids[keep], pipe_from=net.pipe_from[keep],
                       pipe_to=net.pipe_to[keep], length=net.length[keep],
                       diameter=net.diameter[keep], roughness=net.roughness[keep],
                       minor_loss=net.minor_loss[keep], status=net.status[keep],
                       roughness_height=net.roughness_height[keep], group=net.group[keep],
                       material=net.material[keep], installed=net.installed[keep],
                       valves=valves, name=net.name + "-valves")


def timed_pair(net, zoned, repeats: int, reuse: bool = True):
    """Solves of the grid without and with valves in turn (so both see the same load): medians of
    the solve times and of the per-repeat ratios of time per iteration, and the last results."""
    plain, valved = NetworkSolver(net, reuse_factor=reuse), NetworkSolver(zoned, reuse_factor=reuse)
    t_plain, t_valved, ratios, r0, r1 = [], [], [], None, None
    for _ in range(repeats):
        t0 = time.perf_counter()
        r0 = plain.solve()
        t_plain.append(time.perf_counter() - t0)
        t0 = time.perf_counter()
        r1 = valved.solve()
        t_valved.append(time.perf_counter() - t0)
        ratios.append((t_valved[-1] / r1.iterations) / (t_plain[-1] / r0.iterations))
    median = statistics.median
    return median(t_plain), median(t_valved), median(ratios), r0, r1


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="71,159")
    parser.add_argument("--every", type=int, default=300)
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--code", default=None, help="checkout whose calib is timed (default this one)")
    args = parser.parse_args(argv)
    import calib
    stamp = time.strftime("%Y-%m-%d %H:%M UTC", time.gmtime())
    print(f"# {stamp}, {platform.processor() or platform.machine()}, {os.cpu_count()} cores, "
          f"Python {platform.python_version()}, load {os.getloadavg()[0]:.2f}; "
          f"code {Path(calib.__file__).parents[1]}")
    print("| pipes | valves | factor reuse | solve s (no valves / valves) | iterations "
          "| factorizations | s per iteration | ratio | valve states (active/open/closed) |")
    print("|---|---|---|---|---|---|---|---|---|")
    for m in (int(s) for s in args.sizes.split(",")):
        net = square_grid(m)
        zoned = with_valves(net, args.every)
        for reuse in (True, False):
            t0, t1, ratio, r0, r1 = timed_pair(net, zoned, args.repeats, reuse)
            per0, per1 = t0 / r0.iterations, t1 / r1.iterations
            states = list(r1.valve_state)
            print(f"| {net.n_pipes} | {len(zoned.valves)} | {'yes' if reuse else 'no'} | "
                  f"{t0:.3f} / {t1:.3f} | {r0.iterations} / {r1.iterations} | "
                  f"{r0.factorizations} / {r1.factorizations} | "
                  f"{per0 * 1e3:.2f} / {per1 * 1e3:.2f} ms | {ratio:.2f} | "
                  f"{states.count('active')}/{states.count('open')}/{states.count('closed')} |")
    print(f"# load after: {os.getloadavg()[0]:.2f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
