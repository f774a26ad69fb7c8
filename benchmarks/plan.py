"""How much a planned day narrows each group's C, against the demo's current heuristic and random tests.

    python benchmarks/plan.py [--tests 12] [--random 20]

On the demo town Tallowmere (invented): the plan (``calib.loop.plan``, D- and A-optimal greedy,
handbook prior, planned at the prior's C) against the demo day's own 12 tests
(``field_samples/make_tests.py``'s heuristic: tests aimed at each group in turn, gauges by
finite-difference sensitivity) and against random tests of the same number (a random hydrant that can
flow within the limits, at its largest standard flow, two random gauges among those that drop 4 psi
or more; mean over draws). All are scored the same way: the sd of each group's C after the tests from
the information matrix ``P^-1 + sum d d^T / (2 sigma^2)``, linearized at the demo's true C
(truth.json), gauge sigma 1 psi. Records ``uptime`` with the figures.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from calib.calibration import make_groups, read_tests  # noqa: E402
from calib.loop.plan import Planner, posterior_sd  # noqa: E402
from calib.loop.state import handbook_state  # noqa: E402
from calib.network.io import read_network  # noqa: E402


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--tests", type=int, default=12)
    ap.add_argument("--random", type=int, default=20)
    args = ap.parse_args()
    demo = ROOT / "field_samples" / "tallowmere"
    net = read_network(demo / "network")
    g = make_groups(net)
    truth = json.loads((demo / "tests" / "truth.json").read_text())
    true_c = np.array([truth["c_factor"][n] for n in g.names])
    state = handbook_state(net, g, 2026.0)
    judge = Planner(net, g, true_c)
    rows = {}
    for crit in ("D", "A"):
        t0 = time.perf_counter()
        plan = Planner(net, g, state.mean).plan(args.tests, state.cov, crit)
        took = time.perf_counter() - t0
        tests = [(net.node_index[t.flow_nodes[0]], t.flow, [net.node_index[x] for x in t.gauge_nodes])
                 for t in plan.tests]
        rows[f"plan ({crit}-optimal, {took:.0f} s to plan)"] = posterior_sd(judge, state.cov, tests)
    day = read_tests(demo / "tests", net)
    heur = []
    for t in range(day.n_tests):
        flows = day.flows[t]
        gauges = list(dict.fromkeys(int(n) for n in day.node[day.test == t]))
        heur.append((flows, gauges))
    F = np.linalg.inv(state.cov)
    for flows, gauges in heur:  # several flowing hydrants: solve with all of them
        from calib.hydraulics import Snapshot
        snap = Snapshot(extra_demand={str(net.node_ids[n]): q for n, q in flows.items()})
        res = judge.solver.solve(snap, roughness=judge.rough, warm_start=judge.rest)
        from calib import units
        d = (judge._dH(res) - judge.rest_dH) / (np.sqrt(2.0) * units.pressure_to_head(judge.sigma))
        for x in gauges:
            F = F + np.outer(d[x], d[x])
    rows["demo day's heuristic (make_tests.py)"] = np.sqrt(np.diag(np.linalg.inv(F)))
    rng = np.random.default_rng(0)
    cands = [c for c in (judge.candidate(int(h)) for h in judge.hydrants) if c is not None]
    draws = []
    for _ in range(args.random):
        picks = rng.choice(len(cands), size=args.tests, replace=False)
        tests = []
        for k in picks:
            c = cands[k]
            gauges = list(rng.choice(c.gauges, size=min(2, len(c.gauges)), replace=False))
            tests.append((c.node, c.flow, gauges))
        draws.append(posterior_sd(judge, state.cov, tests))
    rows[f"random tests (mean of {args.random} draws)"] = np.mean(draws, axis=0)
    rows["handbook prior alone"] = np.sqrt(np.diag(state.cov))
    w = max(len(k) for k in rows)
    print(f"sd of C after {args.tests} tests; load average {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores")
    print(f"| {'design':<{w}s} | " + " | ".join(g.names) + " | sum of variances |")
    print("|" + "---|" * (len(g.names) + 2))
    for k, sd in rows.items():
        print(f"| {k:<{w}s} | " + " | ".join(f"{v:.2f}" for v in sd) + f" | {np.sum(sd ** 2):.1f} |")


if __name__ == "__main__":
    main()
