"""Stacked snapshots (calib.hydraulics.stacked): K copies of a network solved as one block-diagonal
network must give each copy's own solve, to the solver's tolerance, and each copy at least its own
accuracy; checked against separate solves (the unchanged solver, whose reference tests stand on
published cases) and a closed form."""

from pathlib import Path

import numpy as np
import pytest

from calib.hydraulics import NetworkSolver, Snapshot
from calib.hydraulics.stacked import SEP, StackedNetwork, StackedSolver
from calib.network.io import read_network
from tests.hydraulics.conftest import build

DEMO = Path(__file__).resolve().parents[2] / "field_samples" / "tallowmere"


@pytest.fixture(scope="module")
def demo():
    """The demo town (two reducing-valve stations, a throttle, a tank) and a spread of loadings:
    base, a flowing hydrant in the high and in the low zone, a higher demand factor, a tank level."""
    net = read_network(DEMO / "network")
    hydrants = [str(i) for i in net.junction_ids[net.hydrant]]
    tank = str(net.source_ids[-1])
    snaps = [Snapshot(label="base"),
             Snapshot(extra_demand={hydrants[3]: 0.063}, label="flow a"),
             Snapshot(extra_demand={hydrants[40]: 0.07, hydrants[41]: 0.02}, label="flow b"),
             Snapshot(extra_demand={hydrants[-5]: 0.05}, source_head={tank: float(net.source_head[-1]) - 2.0},
                      label="tank low"),
             Snapshot(extra_demand={hydrants[70]: 0.08}, label="flow c")]
    return net, snaps


def _separate(net, snaps, roughness=None):
    solver = NetworkSolver(net)
    return [solver.solve(s, roughness=roughness) for s in snaps], solver


def test_stacked_solve_matches_separate_solves_on_the_demo_town(demo):
    # each block of the stacked system is its copy's own system: heads, flows, valve states and zones
    # agree with separate solves to the solver's tolerance (head_tol 1e-6 m; 1e-5 m allowed as both
    # sides stop within their own tolerance)
    net, snaps = demo
    alone, solver = _separate(net, snaps)
    ss = StackedSolver(solver, len(snaps))
    stacked, parts = ss.solve(snaps)
    assert ss.stack.network.n_pipes == len(snaps) * net.n_pipes
    for snap, a, b in zip(snaps, alone, parts):
        np.testing.assert_allclose(b.head, a.head, atol=1e-5, rtol=0)
        np.testing.assert_allclose(b.flow, a.flow, atol=1e-7, rtol=0)
        assert list(b.valve_state) == list(a.valve_state)
        assert list(b.zone) == list(a.zone)
        assert b.closed_links == a.closed_links and b.isolated == a.isolated
        assert b.snapshot is snap  # each copy's result carries its own loading
        assert not any(SEP in str(z) for z in b.zone)
    # the loadings differ: the comparison is not of five equal states
    assert np.abs(parts[2].head - parts[0].head).max() > 1.0


def test_every_copy_keeps_at_least_its_own_mass_accuracy(demo):
    # the solver's mass tolerance is relative to the total demand, which grows K-fold in a stack;
    # scaled by the smallest copy's share, each copy's largest mass-balance error stays within
    # mass_tol x its own total demand (as when solved alone)
    net, snaps = demo
    solver = NetworkSolver(net)
    ss = StackedSolver(solver, len(snaps))
    _res, parts = ss.solve(snaps)
    for snap, part in zip(snaps, parts):
        total = abs(net.demand).sum() * snap.demand_factor + sum(snap.extra_demand.values())
        assert part.max_mass_error <= max(solver.mass_tol * total, solver.mass_tol_abs)
    assert ss.solver.mass_tol < solver.mass_tol / (len(snaps) - 1)


def test_two_copies_of_one_pipe_against_the_closed_form():
    # check-values.md: SI Hazen-Williams h = 10.67 L Q^1.852 / (C^1.852 D^4.8704); one pipe from a
    # 50 m reservoir to a junction drawing Q: H = 50 - h. Copy 0 draws 20 L/s, copy 1 35 L/s at C 110
    L, D, C = 400.0, 0.2, 110.0
    net = build([("J", 0.0, 0.0)], [("R", 50.0)], [("P", "R", "J", L, D, C)])
    ss = StackedSolver(NetworkSolver(net), 2)
    _res, parts = ss.solve([Snapshot(extra_demand={"J": 0.020}), Snapshot(extra_demand={"J": 0.035})])
    for q, part in zip((0.020, 0.035), parts):
        h = 10.67 * L * q ** 1.852 / (C ** 1.852 * D ** 4.8704)
        assert part.head[0] == pytest.approx(50.0 - h, abs=1e-6)
        assert part.flow[0] == pytest.approx(q, rel=1e-9)


def test_per_copy_roughness_and_source_heads():
    # a (k, n_pipes) roughness gives each copy its own C; source heads are per copy too
    L, D = 400.0, 0.2
    net = build([("J", 0.0, 0.01)], [("R", 50.0)], [("P", "R", "J", L, D, 100.0)])
    ss = StackedSolver(NetworkSolver(net), 3)
    snaps = [Snapshot(), Snapshot(), Snapshot(source_head={"R": 45.0})]
    _res, parts = ss.solve(snaps, roughness=np.array([[80.0], [130.0], [130.0]]))
    for c, head, part in zip((80.0, 130.0, 130.0), (50.0, 50.0, 45.0), parts):
        h = 10.67 * L * 0.01 ** 1.852 / (c ** 1.852 * D ** 4.8704)
        assert part.head[0] == pytest.approx(head - h, abs=1e-6)


def test_warm_start_joined_from_per_copy_results(demo):
    # a stack warm-started from its copies' own last solutions needs few Newton steps, and lands on
    # the same solution as a cold stacked solve
    net, snaps = demo
    solver = NetworkSolver(net)
    ss = StackedSolver(solver, len(snaps))
    cold, parts = ss.solve(snaps)
    warm, parts2 = ss.solve(snaps, warm=parts)
    assert warm.iterations < cold.iterations
    for a, b in zip(parts, parts2):
        np.testing.assert_allclose(b.head, a.head, atol=1e-5, rtol=0)


def test_stacked_sensitivities_match_separate_ones():
    # one sensitivity solve of the stack against one per copy: dH/dC of every pipe (columns) at each
    # copy's solution
    net = build([("A", 0.0, 0.004), ("B", 2.0, 0.006), ("C", 1.0, 0.003)], [("R", 60.0)],
                [("P1", "R", "A", 300.0, 0.25, 120.0), ("P2", "A", "B", 250.0, 0.15, 100.0),
                 ("P3", "A", "C", 200.0, 0.15, 90.0), ("P4", "B", "C", 350.0, 0.1, 110.0)])
    snaps = [Snapshot(extra_demand={"B": 0.02}), Snapshot(extra_demand={"C": 0.03}, demand_factor=1.0)]
    alone, solver = _separate(net, snaps)
    ss = StackedSolver(solver, 2)
    res, _parts = ss.solve(snaps)
    st = ss.stack
    dhdc = ss.dheadloss_droughness(res)
    dF1 = np.zeros((st.link_map.size, net.n_pipes))
    for c in range(2):
        dF1[st.pipe_map[c], np.arange(net.n_pipes)] = dhdc[st.pipe_map[c]]
    dH, _ = ss.sensitivities(res, dF1, np.zeros((st.junction_map.size, net.n_pipes)))
    for c, a in enumerate(alone):
        d = solver.dheadloss_droughness(a)
        ref, _ = solver.sensitivities(a, np.diag(d), np.zeros((net.n_junctions, net.n_pipes)))
        np.testing.assert_allclose(dH[st.junction_map[c]], ref, rtol=1e-6, atol=1e-12)
        assert np.abs(ref).max() > 0


def test_snapshots_of_one_stack_must_share_their_demand_factor():
    net = build([("J", 0.0, 0.01)], [("R", 50.0)], [("P", "R", "J", 400.0, 0.2, 100.0)])
    st = StackedNetwork(net, 2)
    with pytest.raises(ValueError, match="demand factor"):
        st.snapshot([Snapshot(demand_factor=1.0), Snapshot(demand_factor=1.2)])
    with pytest.raises(ValueError, match="2 copies"):
        st.snapshot([Snapshot()])
    with pytest.raises(ValueError, match="at least one copy"):
        StackedNetwork(net, 0)


def test_pumps_check_valves_closed_pipes_and_held_grades_per_copy():
    # a random looped network (20 junctions, two sources) with a pump lifting from a low reservoir,
    # a check valve, a closed pipe; copies differ in the pump's lift need, one copy holds a junction's
    # grade (the fire-flow scan's held node) and reports its draw: each copy as its own solve
    from calib.network.model import PipeStatus, Pumps
    from tests.hydraulics.conftest import random_looped
    base = random_looped(20, seed=7, n_sources=2)
    nj = base.n_junctions
    status = base.status.copy()
    status[7] = PipeStatus.CHECK_VALVE  # closes against reverse flow at the base loading
    status[5] = PipeStatus.CLOSED
    pumps = Pumps(ids=np.array(["PU"], dtype=object), from_node=np.array([nj + 1]),
                  to_node=np.array([8]), shutoff_head=np.array([45.0]), curve_r=np.array([2000.0]),
                  curve_n=np.array([2.0]), speed=np.array([1.0]))
    net = base.replace(status=status, pumps=pumps,
                       source_head=np.array([base.source_head[0], base.source_head[1] - 40.0]))
    low = str(net.source_ids[1])
    j = [str(i) for i in net.junction_ids]
    snaps = [Snapshot(label="base"), Snapshot(extra_demand={j[12]: 0.02}, label="flow"),
             Snapshot(source_head={low: float(net.source_head[1]) - 5.0}, label="low lower"),
             Snapshot(held_head={j[15]: float(net.elevation[15]) + 14.06}, label="held")]
    alone, solver = _separate(net, snaps)
    assert alone[3].held_flow and alone[0].pump_flow[0] > 0  # the cases are exercised
    assert {"P5", "P7"} <= set(alone[0].closed_links)
    _res, parts = StackedSolver(solver, len(snaps)).solve(snaps)
    for a, b in zip(alone, parts):
        np.testing.assert_allclose(b.head, a.head, atol=1e-5, rtol=0)
        np.testing.assert_allclose(b.flow, a.flow, atol=1e-7, rtol=0)
        np.testing.assert_allclose(b.pump_flow, a.pump_flow, atol=1e-7, rtol=0)
        assert b.closed_links == a.closed_links
        assert b.held_flow.keys() == a.held_flow.keys()
        for k in a.held_flow:
            assert b.held_flow[k] == pytest.approx(a.held_flow[k], abs=1e-7)


def test_stacks_are_kept_per_solver_and_size_and_released_with_the_solver():
    # one stack (pattern, ordering) per (solver, k), reused; it goes when its solver goes
    import gc

    from calib.hydraulics.stacked import _CACHE, stacked_solver
    net = build([("J", 0.0, 0.01)], [("R", 50.0)], [("P", "R", "J", 400.0, 0.2, 100.0)])
    solver = NetworkSolver(net)
    a = stacked_solver(solver, 3)
    assert stacked_solver(solver, 3) is a and stacked_solver(solver, 4) is not a
    assert solver in _CACHE
    n = len(_CACHE)
    del solver, a
    gc.collect()
    assert len(_CACHE) == n - 1


def test_a_stack_stops_when_every_copy_meets_its_own_tolerances(demo):
    # the stack-wide rule holds the relative tolerances to the smallest copy's share of the total
    # demand; with each copy checked at its own (``StackedNetwork.settled``) the stack stops once
    # its slowest copy has converged as it would alone. Reference: each copy solved alone with
    # tolerances 100 x tighter; the stacked copies must agree within the solver's head tolerance.
    net, snaps = demo
    snaps = snaps * 3  # 15 copies: the smallest copy's share of the demand about a twentieth
    c = np.asarray(net.roughness, float)
    its = {}
    for per_copy in (True, False):
        ss = StackedSolver(NetworkSolver(net), len(snaps))
        if not per_copy:
            ss.solver.copies = None  # the stack-wide rule alone
        r0, _ = ss.solve(snaps, roughness=c)
        r1, parts = ss.solve(snaps, roughness=c * 1.05, warm=r0)  # a fit's next evaluation
        its[per_copy] = r1.iterations
        if per_copy:
            tight = NetworkSolver(net, flow_tol=1e-10, head_tol=1e-8, energy_tol=1e-8,
                                  mass_tol=1e-10)
            for snap, part in zip(snaps, parts):
                ref = tight.solve(snap, roughness=c * 1.05)
                np.testing.assert_allclose(part.head, ref.head, atol=1e-6, rtol=0)
                np.testing.assert_allclose(part.flow, ref.flow, atol=1e-8, rtol=0)
    assert its[True] < its[False]
