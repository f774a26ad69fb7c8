"""Benchmarks of the check and the closure finder (run by hand; figures in benchmarks/README.md).

    python benchmarks/loop.py check            # the check on the demo day: time, verdict counts
    python benchmarks/loop.py check-days N     # N generated older-town days: false suspects, planted found
    python benchmarks/loop.py closures N [S]   # N generated older-town days (seeds S..) with a closed pipe: its rank
    python benchmarks/loop.py closures-alone N # the same, each closure scored on the one test alone
    python benchmarks/loop.py closures-demo N  # the demo town's day with a pipe closed in the truth
    python benchmarks/loop.py closures-8k      # one ranking on a grid of about 8,000 pipes
    python benchmarks/loop.py device [REPEAT]  # the app's on-site check as a tablet runs it (see below)

All data invented (calib.loop.trials, the demo town Tallowmere). Records ``uptime`` with the figures.
"""

from __future__ import annotations

import os
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from calib.calibration import make_groups, read_tests  # noqa: E402
from calib.loop.check import check_tests  # noqa: E402
from calib.loop.closures import ClosureFinder  # noqa: E402
from calib.loop.linear import split_tests  # noqa: E402
from calib.loop.state import handbook_state, initial_state  # noqa: E402
from calib.network.io import read_network  # noqa: E402


def load() -> str:
    return f"load average {os.getloadavg()[0]:.2f} (1 min) on {os.cpu_count()} cores"


def bench_check() -> None:
    demo = ROOT / "field_samples" / "tallowmere"
    net = read_network(demo / "network")
    tests = read_tests(demo / "tests", net)
    g = make_groups(net)
    finder = ClosureFinder(net, g)
    times = []
    for _ in range(3):
        t0 = time.perf_counter()
        v = check_tests(net, tests, initial_state(net, g, "handbook", tests=tests), g,
                        closures=finder.best_for_check)
        times.append(time.perf_counter() - t0)
    print(f"demo day: {len(v)} readings, {sum(x.suspect for x in v)} suspect; "
          f"check of the whole day {min(times):.2f} s (best of 3), per test {min(times) / tests.n_tests:.3f} s; {load()}")


def bench_check_days(n: int) -> None:
    from calib.loop.trials import TEST_YEAR, older_town_day
    false = found = readings = 0
    for seed in range(n):
        d = older_town_day(seed)
        v = check_tests(d.network, d.tests, handbook_state(d.network, d.grouping, TEST_YEAR), d.grouping)
        sus = [x.row for x in v if x.suspect]
        false += sum(r != d.planted for r in sus)
        found += d.planted in sus
        readings += len(v)
    print(f"{n} generated days ({readings} readings): planted found {found}/{n}, good readings suspect "
          f"{false}; {load()}")


def bench_closures(n: int, alone: bool = False, town: str = "older", first_seed: int = 0) -> None:
    from calib.loop.trials import closure_trial, demo_closure_trial
    make = demo_closure_trial if town == "demo" else closure_trial
    ranks, none, times, cpu = [], 0, [], []
    for seed in range(first_seed, first_seed + n):
        tr = make(seed)
        if tr is None:
            none += 1
            continue
        g = make_groups(tr.network)
        f = ClosureFinder(tr.network, g)
        day = split_tests(tr.tests)
        test = next(t for t in day if t.test_id == tr.tests.test_ids[tr.test])
        others = () if alone else day
        state = f.lin.nominal(g.length_weighted(tr.network, tr.network.roughness), test)
        t0, c0 = time.perf_counter(), time.process_time()
        ranked = f.rank(test, state, others=others)
        times.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
        chains = f._series_chains(test, others)
        hits = [i + 1 for i, c in enumerate(ranked) if chains[c.pipe] == chains[tr.closed]]
        r = hits[0] if hits else 99
        ranks.append(r)
        if r != 1 and not ranked:
            print(f"  seed {seed}: closed {tr.network.pipe_ids[tr.closed]}: no pipe listed")
        elif r != 1:
            true_after = next((c.score for c in ranked if c.pipe == tr.closed), float("nan"))
            print(f"  seed {seed}: closed {tr.network.pipe_ids[tr.closed]} ranks {r if r < 99 else '>10'}; "
                  f"first {ranked[0].pipe_id} ({ranked[0].note}) score {ranked[0].score:.1f}, the closed "
                  f"pipe's {true_after:.1f}, before {ranked[0].day_before:.1f} on {sum(len(t.node) for t in [test, *others]) - (len(test.node) if others else 0)} readings")
    ranks = np.array(ranks)
    print(f"{town} town, seeds {first_seed}-{first_seed + n - 1}, {'this test alone' if alone else 'the day'}: "
          f"{len(ranks)} trials with a visible closure ({none} seeds with none in 20 draws): first "
          f"{np.mean(ranks == 1):.0%}, top 3 {np.mean(ranks <= 3):.0%}, worst rank "
          f"{'>10' if ranks.max() == 99 else ranks.max()}; median ranking time {np.median(times):.2f} s wall, {np.median(cpu):.2f} s CPU "
          f"(max {np.max(times):.1f} s wall, {np.max(cpu):.1f} s CPU); {load()}")


def bench_closures_8k() -> None:
    from calib.calibration import synthetic
    from calib.hydraulics import NetworkSolver
    net = synthetic.grid_network(64, 64, n_groups=3, seed=1, source_head=90.0)
    g = make_groups(net)
    plan = synthetic.plan_tests(net, 4, seed=2, n_gauges=3)
    truth = net.roughness.copy()
    tests = synthetic.synthetic_tests(net, truth * 0.9, plan, seed=3)
    for others in ((), "day"):
        f = ClosureFinder(net, g, solver=NetworkSolver(net, headloss="hazen-williams"))
        day = split_tests(tests)
        test = day[0]
        state = f.lin.nominal(g.length_weighted(net, net.roughness), test)
        t0, c0 = time.perf_counter(), time.process_time()
        f.rank(test, state, others=day if others else ())
        print(f"{net.n_pipes} pipes, {net.n_junctions} junctions: ranking one test "
              f"{'with the 3 other tests of its day' if others else 'alone'} {time.perf_counter() - t0:.1f} s "
              f"wall, {time.process_time() - c0:.1f} s CPU; {load()}")


def _app_job(net, tests, k: int):
    """The field app's CheckJob for the demo day's test number ``k`` (0-based), the tests before it
    as the day's earlier ones: what mobile.services.check hands its worker on site."""
    from calib.units import GAMMA_WATER
    from mobile.services.check import TOLERANCE, CheckJob
    ids = net.node_ids

    def one(t):
        observed = {}
        for j in np.flatnonzero(tests.test == t):
            at_node = tests.pressure[j] + GAMMA_WATER * tests.gauge_height[j]
            observed.setdefault(str(ids[tests.node[j]]), {})[tests.kind[j]] = at_node
        return ({str(ids[n]): q for n, q in tests.flows[t].items()},
                {g: (v["static"], v["residual"]) for g, v in observed.items()},
                {str(ids[s]): h for s, h in tests.source_head[t].items()})

    flows, observed, grades = one(k)
    return CheckJob(net, flows, list(observed), observed, "us", TOLERANCE, grades,
                    earlier=[one(t) for t in range(k)])


def bench_device(repeat: int) -> None:
    """The on-site check exactly as the app's worker runs it (``mobile.services.check.run_job``; no
    Kivy needed), on the demo day: the first test (no earlier tests), the test with the planted
    reading (its closure ranking included) and the last test (every earlier test re-judged: the
    slowest check of the day). Prints the device facts to record beside the times."""
    import json
    import platform

    import scipy

    t0 = time.perf_counter()
    from mobile.services.check import run_job
    import calib.loop.check  # noqa: F401 - imported by the first check in the app
    imports = time.perf_counter() - t0
    demo = ROOT / "field_samples" / "tallowmere"
    net = read_network(demo / "network")
    tests = read_tests(demo / "tests", net)
    planted = json.loads((demo / "tests" / "truth.json").read_text())["planted"]["test_id"]
    cases = [("first test", 0), (f"{planted} (planted reading, closures ranked)", tests.test_ids.index(planted)),
             ("last test", tests.n_tests - 1)]
    affinity = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else "?"
    print(f"device: {platform.machine()} {platform.platform()}; Python {platform.python_version()}, "
          f"numpy {np.__version__}, scipy {scipy.__version__}; {os.cpu_count()} cores, {affinity} usable "
          f"by this process; {load()}")
    print(f"imports of the check (beyond the network and tests readers): {imports:.2f} s")
    for name, k in cases:
        times, result = [], None
        for _ in range(repeat):
            job = _app_job(net, tests, k)
            t1 = time.perf_counter()
            result = run_job(job)
            times.append(time.perf_counter() - t1)
        bad = sum(g.suspect for g in result.gauges)
        print(f"{name}: {tests.test_ids[k]} with {k} earlier test(s): first {times[0]:.2f} s, best of "
              f"{repeat} {min(times):.2f} s; {len(result.gauges)} gauges, {bad} suspect")


if __name__ == "__main__":
    what = sys.argv[1] if len(sys.argv) > 1 else "check"
    n = int(sys.argv[2]) if len(sys.argv) > 2 else 40
    seed0 = int(sys.argv[3]) if len(sys.argv) > 3 else 0
    {"check": lambda: bench_check(), "check-days": lambda: bench_check_days(n),
     "closures": lambda: bench_closures(n, first_seed=seed0),
     "closures-alone": lambda: bench_closures(n, alone=True, first_seed=seed0),
     "closures-demo": lambda: bench_closures(n, town="demo", first_seed=seed0),
     "closures-8k": lambda: bench_closures_8k(),
     "device": lambda: bench_device(int(sys.argv[2]) if len(sys.argv) > 2 else 3)}[what]()
