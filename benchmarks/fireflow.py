"""Fire-flow scan speed: hydrants per second per core, scaling from 1 to 2 Dask workers, and what
20k hydrants would take on N workers (run by hand, never in the tests).

    python benchmarks/fireflow.py [--sample10k 120] [--sample50k 16] [--dask 240] [--full]
                                  [--full-only] [--tree PATH] [--system-search always|binding]

Grids: ``benchmarks/solver.py``'s square grids (71 x 71 junctions, 9,942 pipes; 159 x 159, 50,246
pipes; invented data). Every junction counts as a hydrant. ``--full`` also scans all 5,041 junctions
of the 10k grid on a local cluster of 2 workers (the issue's target: under 2 minutes here).
``--full-only`` runs only that scan; ``--tree PATH`` imports ``calib`` from another checkout (e.g. a
pristine main) for a same-run comparison, with that checkout's default options unless
``--system-search`` is given. The machine's load (``os.getloadavg``) is printed with the figures: it
is shared.
"""

from __future__ import annotations

import argparse
import logging
import os
import sys
import time
from pathlib import Path

import numpy as np

# --tree PATH: calib from that checkout (read before the imports below)
_TREE = (sys.argv[sys.argv.index("--tree") + 1] if "--tree" in sys.argv[:-1]
         else str(Path(__file__).resolve().parents[1]))
sys.path.insert(0, _TREE)
sys.path.insert(0, str(Path(__file__).resolve().parent))

from calib.fireflow import FireFlowScan, ScanOptions, distribute  # noqa: E402
from solver import square_grid  # noqa: E402


def load() -> str:
    return "load %.2f %.2f %.2f" % os.getloadavg()


def sample(net, n: int, seed: int = 1) -> list[str]:
    rng = np.random.default_rng(seed)
    ids = net.node_ids[: net.n_junctions]
    return [str(i) for i in rng.choice(ids, size=min(n, len(ids)), replace=False)]


def serial_rate(net, nodes, options=None) -> dict:
    t0 = time.perf_counter()
    scan = FireFlowScan(net, options=options)
    setup = time.perf_counter() - t0
    counts = [0, 0]  # Newton iterations, factorizations of the hydrants' solves
    solve = scan.solver.solve

    def counted(*a, **kw):
        r = solve(*a, **kw)
        counts[0] += r.iterations
        counts[1] += r.factorizations
        return r
    scan.solver.solve = counted
    t0, c0 = time.perf_counter(), time.process_time()
    for node in nodes:
        scan.hydrant(node)
    dt = time.perf_counter() - t0
    cpu = time.process_time() - c0  # this process's CPU time: less moved by the other users' load
    return dict(pipes=net.n_pipes, hydrants=len(nodes), setup=setup, seconds=dt, cpu=cpu / len(nodes),
                per_hydrant=dt / len(nodes), rate=len(nodes) / dt,
                solves=(scan.solves - 1) / len(nodes), iterations=counts[0] / len(nodes),
                factorizations=counts[1] / len(nodes))


def block(net, n: int) -> list[str]:
    """n junctions that follow each other in the scan's locality order, from the middle."""
    from calib.fireflow.scan import locality_order
    ordered = locality_order(net, [str(i) for i in net.node_ids[: net.n_junctions]])
    start = max(0, len(ordered) // 2 - n // 2)
    return ordered[start:start + n]


def serial(name, net, n, opts, neighbours=False) -> dict:
    nodes = block(net, n) if neighbours else sample(net, n)
    r = serial_rate(net, nodes, opts)
    print(f"{name} grid ({r['pipes']} pipes), one process, {'block' if neighbours else 'random'}: "
          f"{r['hydrants']} hydrants in {r['seconds']:.1f} s = {r['rate']:.2f} hydrants/s per core "
          f"({r['per_hydrant']:.3f} s each, CPU {r['cpu']:.3f} s each = {1 / r['cpu']:.2f} "
          f"hydrants per CPU-second; {r['solves']:.2f} solves, "
          f"{r['iterations']:.1f} Newton iterations, {r['factorizations']:.1f} factorizations "
          f"each; set-up {r['setup']:.2f} s), {load()}")
    return r


def dask_rate(net, nodes, workers: int, options=None) -> dict:
    from dask.distributed import Client, LocalCluster
    t0 = time.perf_counter()
    with LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                      dashboard_address=None, silence_logs=logging.CRITICAL) as lc, Client(lc) as c:
        startup = time.perf_counter() - t0
        res = distribute.run(net, nodes, options=options, client=c, progress=False)
    assert not res.failures, res.failures
    return dict(workers=workers, hydrants=len(nodes), startup=startup, seconds=res.seconds,
                rate=len(nodes) / res.seconds, solves=res.solves)


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--sample10k", type=int, default=120)
    p.add_argument("--sample50k", type=int, default=16)
    p.add_argument("--dask", type=int, default=240, help="hydrants for the 1 vs 2 worker runs")
    p.add_argument("--full", action="store_true", help="all 5,041 junctions of the 10k grid, 2 workers")
    p.add_argument("--full-only", action="store_true", help="only the --full scan")
    p.add_argument("--serial-only", action="store_true",
                   help="only the one-process figures (no Dask)")
    p.add_argument("--block", action="store_true",
                   help="time a block of neighbouring junctions in the scan's locality order "
                        "(as a full scan meets them) instead of a random sample")
    p.add_argument("--tree", default=_TREE, help="checkout to import calib from (default: this one)")
    p.add_argument("--system-search", choices=("always", "binding"), default=None,
                   help="ScanOptions.system_search (default: the checkout's default)")
    args = p.parse_args(argv)
    opts = (ScanOptions(system_search=args.system_search) if args.system_search
            else ScanOptions())
    import calib
    print(f"calib from {Path(calib.__file__).parent}; system search: {opts.system_search}")
    print(f"start: {load()}, {os.cpu_count()} cores")
    if args.full_only:
        return full_scan(opts)
    grids = {"10k": square_grid(71), "50k": square_grid(159)}
    if args.serial_only:
        for name, n in (("10k", args.sample10k), ("50k", args.sample50k)):
            if n:
                serial(name, grids[name], n, opts, args.block)
        print(f"end: {load()}")
        return 0
    rates = {}
    for name, n in (("10k", args.sample10k), ("50k", args.sample50k)):
        r = serial_rate(grids[name], sample(grids[name], n), opts)
        rates[name] = r["rate"]
        print(f"{name} grid ({r['pipes']} pipes), one process: {r['hydrants']} hydrants in "
              f"{r['seconds']:.1f} s = {r['rate']:.2f} hydrants/s per core "
              f"({r['per_hydrant']:.3f} s each, {r['solves']:.2f} solves, "
              f"{r['iterations']:.1f} Newton iterations, {r['factorizations']:.1f} "
              f"factorizations each; set-up "
              f"{r['setup']:.2f} s), {load()}")
    nodes = sample(grids["10k"], args.dask, seed=2)
    scaling = {}
    for w in (1, 2):
        r = dask_rate(grids["10k"], nodes, w, opts)
        scaling[w] = r["rate"]
        print(f"10k grid, Dask {w} worker(s): {r['hydrants']} hydrants in {r['seconds']:.1f} s = "
              f"{r['rate']:.2f} hydrants/s (cluster start {r['startup']:.1f} s), {load()}")
    eff = scaling[2] / (2 * scaling[1])
    print(f"speed-up 1 -> 2 workers: {scaling[2] / scaling[1]:.2f} (efficiency {eff:.0%})")
    for name in ("10k", "50k"):
        # hydrants are independent: on cores of their own, N workers scan N times as fast (batches
        # cost one scatter of the network per worker); the speed-up measured here on a shared
        # 2-core machine is printed above, not used
        est = ", ".join(f"{n} workers {20000 / (rates[name] * n) / 60:.0f} min"
                        for n in (1, 2, 8, 32, 128))
        print(f"20k hydrants on the {name} grid at this per-core rate, linear in workers: {est}")
    if args.full:
        full_scan(opts)
    print(f"end: {load()}")
    return 0


def full_scan(opts) -> int:
    """Every junction of the 10k grid on a local Dask cluster of 2 workers (the issue's target)."""
    net = square_grid(71)
    allnodes = [str(i) for i in net.node_ids[: net.n_junctions]]
    r = dask_rate(net, allnodes, 2, opts)
    print(f"full 10k grid, every junction ({len(allnodes)}), 2 workers: {r['seconds']:.1f} s "
          f"(+ {r['startup']:.1f} s cluster start) = {r['rate']:.1f} hydrants/s, "
          f"{r['rate'] / 2:.1f} per core; {r['solves'] / len(allnodes):.2f} solves each; {load()}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
