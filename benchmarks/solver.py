"""Benchmark of the network solver on generated square grids (run by hand, never in the test suite).

    python benchmarks/solver.py [--sizes 23,71,159] [--repeats 5] [--code DIR] [--no-many]

For each grid of m x m junctions (about 2 m^2 pipes): random C, diameters, lengths, elevations and
demands, two fixed-grade sources on opposite corners feeding a lattice of larger mains. Prints the
median solve time, iterations, the floor measured in the same run (iterations x one sparse assemble +
factorize + solve of the converged matrix with the best factorization available here - SuperLU on
the solver's ordering, or CHOLMOD (simplicial and supernodal) with a METIS ordering and its analysis
kept when scikit-sparse is installed, refactored in place - best of three, timed right after each
solve so both see the same load; ``--cpu``: CPU time of the process instead of wall time) and the
median of
the per-repeat ratios, then the time of solve_many on 20 snapshots (demand factors and a flowing
hydrant). ``--code DIR`` times the solver of another checkout (e.g. main) with this same script.
The data are invented; no real network.
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
sys.path.insert(0, str(Path(_code).resolve() if _code else Path(__file__).resolve().parents[1]))

from calib.hydraulics import NetworkSolver, Snapshot  # noqa: E402
from calib.network.model import Network  # noqa: E402

#: the clock of every timing: wall time, or with ``--cpu`` this process's CPU time (on a shared
#: machine waiting for a core then counts in neither the solve nor the floor)
_clock = time.process_time if "--cpu" in sys.argv else time.perf_counter


def square_grid(m: int, seed: int = 0) -> Network:
    """m x m junctions on a 100 m lattice; every 10th row and column a 600 mm main; two sources."""
    rng = np.random.default_rng(seed)
    nj = m * m
    idx = np.arange(nj).reshape(m, m)
    f = np.concatenate([idx[:, :-1].ravel(), idx[:-1, :].ravel()])
    t = np.concatenate([idx[:, 1:].ravel(), idx[1:, :].ravel()])
    row = np.concatenate([np.repeat(np.arange(m), m - 1), np.repeat(np.arange(m - 1), m)])
    col = np.concatenate([np.tile(np.arange(m - 1), m), np.tile(np.arange(m), m - 1)])
    horizontal = np.arange(len(f)) < m * (m - 1)
    main = np.where(horizontal, row % 10 == 0, col % 10 == 0)
    diameter = rng.choice([0.15, 0.2, 0.25, 0.3], len(f))
    diameter[main] = 0.6
    # two sources on opposite corners through 1.2 m mains
    f = np.concatenate([f, [nj, nj + 1]])
    t = np.concatenate([t, [0, nj - 1]])
    diameter = np.concatenate([diameter, [1.2, 1.2]])
    p = len(f)
    return Network(
        node_ids=[f"J{i}" for i in range(nj)] + ["R1", "R2"], n_junctions=nj,
        elevation=np.concatenate([rng.uniform(0, 20, nj), [80.0, 75.0]]),
        demand=rng.uniform(0, 2e-4, nj), source_head=[80.0, 75.0],
        pipe_ids=[f"P{i}" for i in range(p)], pipe_from=f, pipe_to=t,
        length=rng.uniform(50, 200, p), diameter=diameter, roughness=rng.uniform(60, 140, p),
        name=f"grid-{m}")


def _floors(solver: NetworkSolver, result):
    """Factor-and-solve functions of the converged matrix, one per backend available here."""
    import scipy.sparse.linalg as spla
    pat = solver.pattern
    w = np.where(result._active, 1.0 / result._grad, 0.0)
    extra = result._isolated_mask.astype(float)
    S = pat.assemble(w, extra)
    out = {"superlu": lambda S: spla.splu(S, permc_spec="NATURAL", diag_pivot_thresh=0.0,
                                          options=dict(SymmetricMode=True)).solve}
    try:
        import warnings
        from sksparse.cholmod import analyze
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            numerics = {mode: analyze(S, mode=mode, ordering_method="metis").cholesky(S)
                        for mode in ("simplicial", "supernodal")}

        def cholmod(numeric):
            def factorize(S):  # refactored in place: no new factor allocated
                numeric.cholesky_inplace(S)
                return numeric.solve_A
            return factorize
        # supernodal too (dense blocks through CHOLMOD's BLAS): the faster one with an optimized
        # BLAS at 200k pipes, so the floor is the best factorization available here
        for mode, numeric in numerics.items():
            out[f"cholmod {mode}"] = cholmod(numeric)
    except ImportError:
        pass
    return pat, w, extra, out


def floor_time(solver: NetworkSolver, result) -> float:
    """Time of one assemble + factorize + solve of the converged system [s] with the fastest
    factorization available (best of three each)."""
    pat, w, extra, backends = _floors(solver, result)
    rhs = np.random.default_rng(1).standard_normal(solver.nj)
    times = []
    for factorize in backends.values():
        for _ in range(3):
            t0 = _clock()
            S = pat.assemble(w, extra)
            factorize(S)(rhs)
            times.append(_clock() - t0)
    return min(times)


def timed_solves(solver: NetworkSolver, repeats: int):
    """Solve and floor measured in turn, so both see the same load: (solve times, floors, result)."""
    solves, floors, result = [], [], None
    for _ in range(repeats):
        t0 = _clock()
        result = solver.solve()
        solves.append(_clock() - t0)
        floors.append(result.iterations * floor_time(solver, result))
    return solves, floors, result


def run(m: int, repeats: int, many: bool = True, plain: bool = True) -> dict:
    net = square_grid(m)
    # small grids solve in milliseconds: more repeats so the medians stand out of the noise
    repeats = max(repeats, 50_000 // net.n_pipes)
    t0 = _clock()
    solver = NetworkSolver(net)
    setup = _clock() - t0
    solves, floors, result = timed_solves(solver, repeats)
    updates = getattr(solver, "updates", "-")  # of the last cold solve (main's solver has none)
    # the same solve with a factorization at every iteration (no CG reuse): the overhead alone
    plain_solves, plain_floors, _ = (timed_solves(NetworkSolver(net, reuse_factor=False), repeats)
                                     if plain else ([np.nan], [1.0], None))
    rng = np.random.default_rng(2)
    hydrants = rng.choice(net.n_junctions, 20)
    snaps = [Snapshot(demand_factor=0.8 + 0.02 * i,
                      extra_demand={str(net.node_ids[h]): 0.063}, label=f"s{i}")
             for i, h in enumerate(hydrants)]  # 0.063 m3/s ~ 1000 gpm at one hydrant
    t0 = _clock()
    many = solver.solve_many(snaps) if many else [result]
    t_many = _clock() - t0 if many else np.nan
    median = statistics.median
    return dict(pipes=net.n_pipes, junctions=net.n_junctions, setup=setup, solve=median(solves),
                iterations=result.iterations, factorizations=result.factorizations,
                updates=updates,
                one=median(floors) / result.iterations, floor=median(floors),
                ratio=median(np.divide(solves, floors)), plain=median(plain_solves),
                plain_ratio=median(np.divide(plain_solves, plain_floors)),
                many=t_many, many_iterations=statistics.mean(r.iterations for r in many),
                mass=result.max_mass_error)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="23,71,159", help="grid sides m (junctions m x m)")
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--code", default=None, help="checkout whose calib is timed (default this one)")
    parser.add_argument("--no-many", action="store_true", help="skip solve_many")
    parser.add_argument("--no-plain", action="store_true", help="skip the factor-every-iteration solve")
    parser.add_argument("--cpu", action="store_true", help="time CPU of this process, not wall")
    args = parser.parse_args(argv)
    import calib
    backend = getattr(NetworkSolver(square_grid(3)).pattern, "backend", "superlu")
    if backend == "cholmod":  # the BLAS CHOLMOD loaded, and from which work it goes supernodal
        from calib.hydraulics import factor
        blas = getattr(factor, "optimized_blas", lambda: None)() or "reference BLAS"
        start = getattr(factor, "supernodal_from", lambda: "never")()
        start = f"{start:.3g}" if isinstance(start, float) else start
        first = getattr(factor, "SUPERNODAL_FIRST_JUNCTIONS", None)  # main before session 22: none
        first = "" if first is None else f", the first factorization from {first} junctions"
        backend += f" ({blas}; supernodal from work {start}{first})"
    stamp = time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())
    print(f"# {stamp}, {platform.processor() or platform.machine()}, {os.cpu_count()} cores, "
          f"Python {platform.python_version()}, load {os.getloadavg()[0]:.2f}, "
          f"{'CPU' if args.cpu else 'wall'} times; "
          f"code {Path(calib.__file__).parents[1]}, backend {backend}")
    print("| pipes | junctions | set-up s | solve s (median) | iterations | factorizations "
          "| low-rank updates "
          "| one assemble+factor+solve s | floor s | ratio | solve s, factor every iteration "
          "| its ratio | solve_many 20 s "
          "| mean iterations (many) | max mass error m3/s |")
    print("|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|")
    for m in (int(v) for v in args.sizes.split(",")):
        r = run(m, args.repeats, many=not args.no_many, plain=not args.no_plain)
        print(f"| {r['pipes']} | {r['junctions']} | {r['setup']:.3f} | {r['solve']:.3f} | "
              f"{r['iterations']} | {r['factorizations']} | {r['updates']} | {r['one']:.4f} | "
              f"{r['floor']:.3f} | "
              f"{r['ratio']:.2f} | {r['plain']:.3f} | {r['plain_ratio']:.2f} | "
              f"{r['many']:.2f} | {r['many_iterations']:.1f} | {r['mass']:.1e} |", flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
