"""How much a planned day narrows each group's C, against the demo's former heuristic and random tests.

    python benchmarks/plan.py [--tests 14] [--random 20]

On the demo town Tallowmere (invented): the plan (``calib.loop.plan``, D- and A-optimal greedy,
handbook prior, planned at the prior's C, 5 psi margin as ``calib plan`` by default), the demo day as
``field_samples/make_tests.py`` now makes it (the same planner, D-optimal, 10 psi margin), the demo
day's former heuristic (``benchmarks/data/former_heuristic_day.csv``: the 14 tests the generator made
before it used the planner - tests aimed at each group in turn, gauges by finite-difference
sensitivity at the true C), and random tests of the same number (a random candidate test - one
hydrant, or two neighbours - that can flow within the limits at its largest standard flow, two random
gauges among those that drop 4 psi or more; mean over draws). All are scored the same way: the sd of
each group's C after the tests from the information matrix ``P^-1 + sum d d^T / (2 sigma^2)``,
linearized at the demo's true C (truth.json), gauge sigma 1 psi. Records the load with the figures.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from calib import units  # noqa: E402
from calib.calibration import make_groups, read_tests  # noqa: E402
from calib.loop.plan import Planner, posterior_sd  # noqa: E402
from calib.loop.state import handbook_state  # noqa: E402
from calib.network.io import read_network  # noqa: E402

FORMER = ROOT / "benchmarks" / "data" / "former_heuristic_day.csv"


def _former(net) -> list:
    """The former heuristic's tests as [({node: flow [m3/s]}, None, [gauge nodes])]."""
    out = []
    for _, r in pd.read_csv(FORMER, dtype=str).iterrows():
        nodes = [net.node_index[n] for n in r["flow_nodes"].split(";")]
        q = [float(v) * units.GPM for v in r["flows [gpm]"].split(";")]
        out.append((dict(zip(nodes, q)), None, [net.node_index[g] for g in r["gauge_nodes"].split(";")]))
    return out


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--tests", type=int, default=14)
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
        tests = [({net.node_index[n]: q for n, q in zip(t.flow_nodes, t.flow_split)}, None,
                  [net.node_index[x] for x in t.gauge_nodes]) for t in plan.tests]
        pairs = sum(len(t.flow_nodes) == 2 for t in plan.tests)
        rows[f"plan ({crit}-optimal, {pairs} two-hydrant tests, {took:.0f} s to plan)"] = \
            posterior_sd(judge, state.cov, tests)
    day = read_tests(demo / "tests", net)
    tests = [(dict(day.flows[t]), None, list(dict.fromkeys(int(n) for n in day.node[day.test == t])))
             for t in range(day.n_tests)]
    rows[f"demo day now (make_tests.py: the plan, D, 10 psi margin; {day.n_tests} tests)"] = \
        posterior_sd(judge, state.cov, tests)
    former = _former(net)
    rows[f"demo day's former heuristic ({len(former)} tests)"] = posterior_sd(judge, state.cov, former)
    rng = np.random.default_rng(0)
    cands = judge.candidates()
    draws = []
    for _ in range(args.random):
        picks = rng.choice(len(cands), size=args.tests, replace=False)
        tests = []
        for k in picks:
            c = cands[k]
            gauges = list(rng.choice(c.gauges, size=min(2, len(c.gauges)), replace=False))
            tests.append((c.flows, None, gauges))
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
