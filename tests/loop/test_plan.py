"""Test planning (calib.loop.plan): the greedy D/A-optimal design and the limits of each planned test.

Sources: NFPA 291 (pitot flow Q = 29.83 c d^2 sqrt(p) [gpm, in, psi]; pitot readings 10-30 psi; no
junction below 20 psi during a test); the D and A criteria as defined by Atkinson, Donev and Tobias
(2007), checked against brute force (a one-test greedy step is the exhaustive optimum); the sampling
design approach of Bush and Uber (1998).
"""

import json

import numpy as np
import pytest

from calib import units
from calib.hydraulics import Snapshot
from calib.loop.plan import (FLOW_STEPS_GPM, GOOD_DROP_PSI, MIN_DROP_PSI, Planner, hose_flow_gpm,
                             outlet_for, plan_frame, plan_geojson, posterior_sd)
from calib.loop.state import handbook_state

PSI = units.PSI


def test_hose_flow_is_the_nfpa_291_pitot_formula():
    # 29.83 x 0.90 x 2.5^2 x sqrt(20) = 750.4 gpm (hand arithmetic of the NFPA 291 formula)
    assert hose_flow_gpm(20.0, 1) == pytest.approx(750.4, abs=0.1)
    from calib.flowtest import pitot_discharge
    assert hose_flow_gpm(20.0, 1) * units.GPM == pytest.approx(
        pitot_discharge(20 * PSI, 2.5 * units.INCH, 0.90), rel=1e-3)
    # 1250 gpm through two hose outlets is a pitot of 13.9 psi: inside 10-30, but not on a hydrant at 15 psi
    text, pitot = outlet_for(1250.0, 60.0)
    assert "two 2.5 in" in text and pitot == pytest.approx((1250 / hose_flow_gpm(1, 2)) ** 2)
    assert outlet_for(600.0, 12.0) is None  # pitot about 12.8 psi needs a residual of 17.8 psi or more
    assert outlet_for(3000.0, 80.0) is None


@pytest.fixture(scope="module")
def planned(demo):
    net, _, grouping, _ = demo
    state = handbook_state(net, grouping, 2026.0)
    planner = Planner(net, grouping, state.mean)
    return planner, state, planner.plan(6, state.cov, "D")


def test_plan_keeps_the_limits(planned, demo):
    planner, _, plan = planned
    net = demo[0]
    assert len(plan.tests) == 6
    used = [n for t in plan.tests for n in t.flow_nodes + t.gauge_nodes]
    assert len(used) == len(set(used))  # no hydrant in two tests
    idx = net.node_index
    for t in plan.tests:
        assert t.flow / units.GPM in FLOW_STEPS_GPM and t.outlets
        assert len(t.flow_split) == len(t.flow_nodes) in (1, 2) and sum(t.flow_split) == pytest.approx(t.flow)
        # an independent solve of the planned test (every flowing hydrant its share): every junction
        # stays at 25 psi or above where it was at rest (NFPA 291's 20 psi plus the 5 psi margin)
        snap = Snapshot(extra_demand=dict(zip(t.flow_nodes, t.flow_split)))
        res = planner.solver.solve(snap, roughness=planner.rough)
        p = np.asarray(res.pressure)[: net.n_junctions]
        ok_at_rest = planner.rest_p >= 25 * PSI
        assert np.all(p[ok_at_rest] >= 25 * PSI - 1e-6)
        for g, drop in zip(t.gauge_nodes, t.expected_drop):
            assert drop == pytest.approx(planner.rest_p[idx[g]] - p[idx[g]], rel=1e-6)
            assert drop >= MIN_DROP_PSI * PSI
    drops = [d for t in plan.tests for d in t.expected_drop]
    assert sum(d >= GOOD_DROP_PSI * PSI for d in drops) >= len(plan.tests)  # Walski's 10 psi: most tests


def test_plan_sd_matches_an_independent_recount_and_falls(planned, demo):
    planner, state, plan = planned
    idx = demo[0].node_index
    tests = [({idx[n]: q for n, q in zip(t.flow_nodes, t.flow_split)}, t.flow, [idx[g] for g in t.gauge_nodes])
             for t in plan.tests]
    assert posterior_sd(planner, state.cov, tests) == pytest.approx(plan.sd_after, rel=1e-6)
    assert np.all(plan.sd_after < plan.sd_prior)
    assert all(t.sd_after < t.sd_before for t in plan.tests)


def test_first_greedy_step_is_the_exhaustive_d_and_a_optimum(demo):
    """One test: the greedy choice must be the best of all candidates by log det F (D) or trace F^-1 (A)."""
    net, _, grouping, _ = demo
    state = handbook_state(net, grouping, 2026.0)
    planner = Planner(net, grouping, state.mean, hydrants=np.array(
        [net.node_index[h] for h in ("J017", "J059", "J099", "J298", "J144", "J270", "J007", "J083")]
        + [i for i in np.flatnonzero(net.hydrant)[:40]]))
    F0 = np.linalg.inv(state.cov)
    for crit, score in (("D", lambda F: np.linalg.slogdet(F)[1]), ("A", lambda F: -np.trace(np.linalg.inv(F)))):
        plan = planner.plan(1, state.cov, crit, n_gauges=1)
        best = -np.inf
        for c in planner.candidates():  # one-hydrant and two-hydrant tests alike
            pool = [g for g in c.gauges if c.drops[g] >= GOOD_DROP_PSI * PSI] or list(c.gauges)
            for g in pool:
                best = max(best, score(F0 + np.outer(c.rows[g], c.rows[g])))
        t = plan.tests[0]
        g = net.node_index[t.gauge_nodes[0]]
        c = planner.candidate(*(net.node_index[n] for n in t.flow_nodes))
        assert score(F0 + np.outer(c.rows[g], c.rows[g])) == pytest.approx(best, rel=1e-9)


def test_two_hydrant_tests_split_the_flow_and_keep_the_limits(planned, demo):
    """A two-hydrant test: neighbours (the mate within 900 ft), the same outlets on each (equal shares,
    each share a standard outlet flow within its hydrant's residual: NFPA 291 pitot 10-30 psi, 5 psi
    below the residual, common practice), every junction at 20 psi plus the margin."""
    planner, _, plan = planned
    net = demo[0]
    idx = net.node_index
    pairs = [t for t in plan.tests if len(t.flow_nodes) == 2]
    # on the demo town at handbook C the D-optimal six-test plan takes one two-hydrant test
    assert pairs, [t.flow_nodes for t in plan.tests]
    for t in pairs:
        a, b = (idx[n] for n in t.flow_nodes)
        assert np.hypot(net.x[a] - net.x[b], net.y[a] - net.y[b]) <= 900 * units.FT
        assert t.flow_split[0] == pytest.approx(t.flow_split[1]) and t.outlets.startswith("on each of the 2")
        res = planner.solver.solve(Snapshot(extra_demand=dict(zip(t.flow_nodes, t.flow_split))),
                                   roughness=planner.rough)
        p = np.asarray(res.pressure)[: net.n_junctions]
        assert outlet_for(t.flow_split[0] / units.GPM, min(p[a], p[b]) / PSI) is not None
        assert np.all(p[planner.rest_p >= 25 * PSI] >= 25 * PSI - 1e-6)
    # without pairs no test flows two hydrants
    singles = planner.plan(6, planned[1].cov, "D", pairs=False)
    assert all(len(t.flow_nodes) == 1 for t in singles.tests)


def test_every_candidate_keeps_the_floor_and_mates_are_nearest(demo):
    """Each candidate (one or two hydrants) keeps every junction at or above its floor; a hydrant's mate
    is its nearest hydrant by map distance, and none beyond the mate radius."""
    net, _, grouping, _ = demo
    state = handbook_state(net, grouping, 2026.0)
    hyd = np.flatnonzero(net.hydrant)
    planner = Planner(net, grouping, state.mean, hydrants=hyd[:12])
    cands = planner.candidates()
    assert any(len(c.nodes) == 2 for c in cands)
    for c in cands:
        assert np.all(planner.rest_p - c.drops >= planner.floor - 1e-6)
        assert sum(c.flows.values()) == pytest.approx(c.flow)
    h = int(hyd[0])
    others = hyd[:12][hyd[:12] != h]
    d = np.hypot(net.x[others] - net.x[h], net.y[others] - net.y[h])
    assert planner.mate(h) == (int(others[np.argmin(d)]) if d.min() <= 900 * units.FT else None)
    assert Planner(net, grouping, state.mean, hydrants=hyd[:12], mate_radius=0.0).mate(h) is None


def test_plan_files(planned, demo, tmp_path):
    _, _, plan = planned
    frame = plan_frame(plan)
    assert list(frame.columns)[:8] == ["test_id", "flow_nodes", "flow [gpm]", "gauge_nodes",
                                       "expected_drop [psi]", "aimed_at", "sd_before", "sd_after"]
    gj = plan_geojson(plan, demo[0])
    json.dumps(gj)
    roles = [f["properties"]["role"] for f in gj["features"]]
    assert roles.count("flow") == sum(len(t.flow_nodes) for t in plan.tests)
    assert frame["flow_split [gpm]"].tolist() == [";".join(f"{q / units.GPM:.0f}" for q in t.flow_split)
                                                  for t in plan.tests]
    assert "expected_drop [kPa]" in plan_frame(plan, "si").columns


def test_plan_command(tmp_path, capsys):
    from pathlib import Path
    import pandas as pd
    from calib.cli import main
    root = Path(__file__).resolve().parents[2] / "field_samples" / "tallowmere"
    out = tmp_path / "plan.csv"
    assert main(["plan", str(root / "network"), "--tests", "2", "--out", str(out), "--year", "2026"]) == 0
    assert len(pd.read_csv(out)) == 2 and (tmp_path / "plan.geojson").is_file()
    assert "D-optimal greedy design" in capsys.readouterr().out
    assert main(["plan", str(root / "network"), "--tests", "0", "--out", str(out)]) == 2
