"""Benchmark of the solver's per-iteration cost on a real fit's workload (run by hand).

    python benchmarks/fit_solves.py record NETWORK TESTS CALLS.pkl [fit options...]
    python benchmarks/fit_solves.py replay CALLS.pkl NETWORK [--code DIR] [--repeats N]
    python benchmarks/fit_solves.py phases NETWORK TESTS [--code DIR]

``record`` runs ``calib fit NETWORK TESTS --no-report`` in this process and keeps every
``NetworkSolver.solve`` call (snapshot, roughness, which earlier result it was warm-started from)
and every ``sensitivities`` call (which result, dF1/dp, dF2/dp) in order (record with
``CALIB_WORKERS=1``: calls in worker processes are not seen). ``replay`` makes the same
calls, in the same order and with the same warm-start chain, on the solver of the checkout
``--code`` (default this one), made with the fit's tolerances (``--tolerances default``: the
solver's own): the same workload for two versions of the solver, whatever path their fits would
take. Prints solves, Newton iterations, factorizations, CPU time of the solves (per iteration, per
solve) and of the sensitivities (per call), the solves with a CHOLMOD factor, and the load; with
``--save FILE.npy`` the heads, link flows and sensitivities of every call, for a comparison of two
versions' answers (``compare A.npy B.npy CALLS.pkl NETWORK``). Times are CPU time of this process
(the machine is shared: wall time moves with the load more). The demo town's data are invented
(Tallowmere).

``phases`` runs ``calib.calibration.fit`` (no report) in this process on one core
(``CALIB_WORKERS=1``: every solve is seen) and prints per phase of the fit (the ``progress``
stage, leave-one-out refits together): solver calls, Newton iterations and factorizations per
call, sensitivity calls and the phase's CPU time. A stacked solve (the demo town's snapshots
solved as one network) counts as one call. Run it for two checkouts (``--code``) in turn.
"""

from __future__ import annotations

import argparse
import os
import pickle
import sys
import time
from pathlib import Path

import numpy as np

_code = sys.argv[sys.argv.index("--code") + 1] if "--code" in sys.argv else None
sys.path.insert(0, str(Path(_code).resolve() if _code else Path(__file__).resolve().parents[1]))


def record(network: str, tests: str, out: str, options: list[str]) -> int:
    import tempfile

    from calib.cli import main as cli_main
    from calib.hydraulics import solver as solver_module
    cls = solver_module.NetworkSolver
    solve, sens = cls.solve, cls.sensitivities
    calls, index, keep = [], {}, []

    def recorded_solve(self, snapshot=None, roughness=None, warm_start=None):
        res = solve(self, snapshot, roughness=roughness, warm_start=warm_start)
        calls.append(("solve", snapshot, None if roughness is None else np.array(roughness),
                      None if warm_start is None else index[id(warm_start)]))
        index[id(res)] = len(calls) - 1
        keep.append(res)  # alive, so that ids are not reused
        return res

    def recorded_sensitivities(self, result, dF1_dp, dF2_dp):
        calls.append(("sens", index[id(result)], np.array(dF1_dp), np.array(dF2_dp)))
        return sens(self, result, dF1_dp, dF2_dp)

    cls.solve, cls.sensitivities = recorded_solve, recorded_sensitivities
    with tempfile.TemporaryDirectory() as tmp:
        rc = cli_main(["fit", network, tests, "--out", str(Path(tmp) / "fit"), "--no-report",
                       "--quiet", *options])
    with open(out, "wb") as fh:
        pickle.dump(calls, fh)
    print(f"recorded {sum(c[0] == 'solve' for c in calls)} solves and "
          f"{sum(c[0] == 'sens' for c in calls)} sensitivities (exit {rc})")
    return rc


def replay(calls_path: str, network: str, repeats: int, save: str | None,
           tolerances: str = "fit") -> int:
    import calib
    from calib.hydraulics import NetworkSolver
    from calib.network.io import read_network
    options = {}
    if tolerances == "fit":  # the solver options of the fit that was recorded (where they exist)
        try:
            from calib.calibration.fit import FIT_TOLERANCES as options
        except ImportError:
            options = {}
    with open(calls_path, "rb") as fh:
        calls = pickle.load(fh)
    net = read_network(network)
    solves = _count_solves()
    for _ in range(repeats):
        solves[0] = 0
        solver, results, outs = NetworkSolver(net, **options), {}, []
        t_solve = t_sens = 0.0
        iterations = factorizations = n_solve = n_sens = 0
        sens_factors = 0  # factorizations in the sensitivities (counted where the code counts)
        for i, call in enumerate(calls):
            if call[0] == "solve":
                _, snap, rough, warm = call
                t0 = time.process_time()
                res = solver.solve(snap, roughness=rough,
                                   warm_start=None if warm is None else results[warm])
                t_solve += time.process_time() - t0
                results[i] = res
                iterations += res.iterations
                factorizations += res.factorizations
                n_solve += 1
                outs.append(np.concatenate([res.head, res.link_flow]))
            else:
                _, which, dF1, dF2 = call
                before = getattr(solver.pattern, "factorizations", None)
                t0 = time.process_time()
                dH, dQ = solver.sensitivities(results[which], dF1, dF2)
                t_sens += time.process_time() - t0
                sens_factors += (solver.pattern.factorizations - before if before is not None
                                 else 1)  # before the counter: one (scratch) factorization each
                n_sens += 1
                outs.append(np.concatenate([np.ravel(dH), np.ravel(dQ)]))
        print(f"{Path(calib.__file__).parents[1]}: {n_solve} solves, {iterations} iterations "
              f"({iterations / n_solve:.2f} a solve), {factorizations} factorizations; solves "
              f"{t_solve:.2f} s CPU ({1e3 * t_solve / iterations:.3f} ms an iteration); "
              f"{n_sens} sensitivities {t_sens:.2f} s ({1e3 * t_sens / max(n_sens, 1):.2f} ms "
              f"each, {sens_factors} factorizations); {solves[0]} solves with a CHOLMOD factor; "
              f"solver options {options or 'defaults'}; "
              f"load {os.getloadavg()[0]:.2f}", flush=True)
    if save:
        np.save(save, np.concatenate(outs))
    return 0


def phases(network: str, tests: str) -> int:
    os.environ["CALIB_WORKERS"] = "1"
    import calib
    from calib.calibration import fit, read_tests
    from calib.hydraulics import solver as solver_module
    from calib.network.io import read_network
    cls = solver_module.NetworkSolver
    solve, sens = cls.solve, cls.sensitivities
    rows: dict = {}
    now = {"calls": 0, "iterations": 0, "factorizations": 0, "sens": 0}

    def counted_solve(self, *args, **kwargs):
        res = solve(self, *args, **kwargs)
        now["calls"] += 1
        now["iterations"] += res.iterations
        now["factorizations"] += res.factorizations
        return res

    def counted_sensitivities(self, *args, **kwargs):
        now["sens"] += 1
        return sens(self, *args, **kwargs)

    last = [time.process_time()]

    def progress(_n, stage):
        stage = stage.split(":")[0]
        row = rows.setdefault(stage, dict.fromkeys((*now, "cpu"), 0.0))
        for k in now:
            row[k] += now[k]
            now[k] = 0
        t = time.process_time()
        row["cpu"] += t - last[0]
        last[0] = t

    cls.solve, cls.sensitivities = counted_solve, counted_sensitivities
    net = read_network(network)
    t0 = time.process_time()
    fit(net, read_tests(tests, net), progress=progress)
    total = time.process_time() - t0
    print(f"{Path(calib.__file__).parents[1]}: fit CPU {total:.2f} s, load "
          f"{os.getloadavg()[0]:.2f}")
    for stage, r in rows.items():
        n = max(r["calls"], 1)
        print(f"  {stage}: {r['calls']:.0f} solver calls, {r['iterations']:.0f} iterations "
              f"({r['iterations'] / n:.2f} a call), {r['factorizations']:.0f} factorizations "
              f"({r['factorizations'] / n:.2f} a call), {r['sens']:.0f} sensitivity calls, "
              f"{r['cpu']:.2f} s CPU")
    return 0


def _count_solves() -> list:
    """Count the solves with a CHOLMOD factor (CG steps and direct solves: two triangular solves
    each), a load-proof figure; [0] is the count."""
    count = [0]
    try:
        from calib.hydraulics import factor
        cls = factor.CholmodSolve
    except (ImportError, AttributeError):
        return count
    call = cls.__call__

    def counted(self, b):
        count[0] += 1
        return call(self, b)
    cls.__call__ = counted
    return count


def compare(a: str, b: str, calls_path: str, network: str) -> int:
    """Largest differences of heads [m], flows [m3/s] and sensitivities between two saves."""
    from calib.network.io import read_network
    net = read_network(network)
    with open(calls_path, "rb") as fh:
        calls = pickle.load(fh)
    x, y = np.load(a), np.load(b)
    n_links = net.n_pipes + len(net.pumps) + len(net.valves)
    worst = dict(head=0.0, flow=0.0, dH=0.0, dQ=0.0)
    pos = 0
    for call in calls:
        if call[0] == "solve":
            parts = (("head", net.n_nodes), ("flow", n_links))
        else:
            p = call[2].shape[1] if call[2].ndim == 2 else 1
            parts = (("dH", net.n_junctions * p), ("dQ", n_links * p))
        for name, n in parts:
            worst[name] = max(worst[name], float(np.abs(x[pos:pos + n] - y[pos:pos + n]).max()))
            pos += n
    print(", ".join(f"largest {k} difference {v:.2g}" for k, v in worst.items()))
    return 0


def main(argv=None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    if "--code" in argv:  # already on sys.path
        i = argv.index("--code")
        del argv[i:i + 2]
    if argv and argv[0] == "record" and len(argv) >= 4:
        return record(argv[1], argv[2], argv[3], argv[4:])
    if argv and argv[0] == "phases" and len(argv) == 3:
        return phases(argv[1], argv[2])
    if argv and argv[0] == "compare" and len(argv) == 5:
        return compare(*argv[1:])
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("mode", choices=["replay"])
    parser.add_argument("calls")
    parser.add_argument("network")
    parser.add_argument("--repeats", type=int, default=1)
    parser.add_argument("--save", default=None)
    parser.add_argument("--tolerances", choices=["fit", "default"], default="fit",
                        help="the solver's tolerances: the fit's (FIT_TOLERANCES, as recorded) "
                             "or the solver's defaults")
    args = parser.parse_args(argv)
    return replay(args.calls, args.network, args.repeats, args.save, args.tolerances)


if __name__ == "__main__":
    raise SystemExit(main())
