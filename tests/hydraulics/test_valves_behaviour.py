"""Valve states in the solver: frozen and held states are named, never silent; zones; the
sensitivities with active valves against central finite differences (a numerical reference,
common practice); the Schur assembly's extra diagonal in a non-trivial ordering."""

import numpy as np
import pytest
import scipy.sparse as sp

from calib.errors import ConvergenceError, NetworkError
from calib.hydraulics import NetworkSolver, Snapshot
from calib.hydraulics.assembly import SchurPattern
from calib.network.model import ValveMode, ValveType
from calib.units import GAMMA_WATER

from .conftest import build
from .test_valves_reference import D_V, UP_J, UP_P, ZONE_J, ZONE_P, with_valves, zoned


def test_a_state_that_keeps_changing_is_frozen_and_named():
    net = zoned(200.0)  # must go from active (its start) to open
    with pytest.raises(ConvergenceError, match="V1"):
        NetworkSolver(net, max_status_changes=0).solve()  # frozen active: contradicts the heads
    res = NetworkSolver(net, max_status_changes=1).solve()  # one change, then frozen: consistent
    assert res.valve_state[0] == "open"
    assert len(res.valve_notes) == 1 and "V1" in res.valve_notes[0]
    assert NetworkSolver(net).solve().valve_notes == []


def test_a_limit_the_network_cannot_meet_is_an_error_naming_the_valve():
    # the zone's only supply is a flow-limiting valve set below the zone's demand (0.010 m3/s)
    net = build(UP_J + ZONE_J, [("R", 100.0)], UP_P + ZONE_P)
    net = with_valves(net, [("F1", "U3", "Z1", D_V, ValveType.FLOW_LIMITING, 0.005,
                             ValveMode.ACTIVE, 1.0)])
    with pytest.raises(NetworkError, match="F1.*only supply"):
        NetworkSolver(net).solve()
    # set above the demand it passes everything, open
    ok = with_valves(build(UP_J + ZONE_J, [("R", 100.0)], UP_P + ZONE_P),
                     [("F1", "U3", "Z1", D_V, ValveType.FLOW_LIMITING, 0.02, ValveMode.ACTIVE,
                       1.0)])
    res = NetworkSolver(ok).solve()
    assert res.valve_state[0] == "open"
    assert res.valve_flow[0] == pytest.approx(0.010, rel=1e-6)


def test_two_reducing_valves_feed_one_zone_and_never_pass_reverse_flow():
    net = build(UP_J + ZONE_J, [("R", 100.0)], UP_P + ZONE_P)
    rows = [("V1", "U3", "Z1", D_V, ValveType.REDUCING, 30.0 * GAMMA_WATER, ValveMode.ACTIVE, 2.0),
            ("V2", "U4", "Z4", D_V, ValveType.REDUCING, 28.0 * GAMMA_WATER, ValveMode.ACTIVE, 2.0)]
    res = NetworkSolver(with_valves(net, rows)).solve()
    z = dict(zip(net.junction_ids, res.zone))
    assert np.all(res.valve_flow >= 0)
    # Z1 held at 35 m by V1 and Z4 at 34 m by V2 unless a valve closed against the other's grade
    for k, node, grade in ((0, 4, 35.0), (1, 7, 34.0)):
        if res.valve_state[k] == "active":
            assert res.head[node] == pytest.approx(grade, abs=1e-6)
        else:
            assert res.valve_state[k] == "closed" and res.valve_flow[k] == 0
            assert res.head[node] >= grade - 1e-4
    active = [str(i) for i, s in zip(["V1", "V2"], res.valve_state) if s == "active"]
    assert z["Z2"] == "+".join(active)
    assert z["U1"] == "R"


def test_sensitivities_with_an_active_reducing_valve_match_finite_differences():
    net = zoned(30.0)
    solver = NetworkSolver(net, flow_tol=1e-12, head_tol=1e-10, energy_tol=1e-10,
                           mass_tol=1e-13, mass_tol_abs=1e-14)
    base = solver.solve()
    d = solver.dheadloss_droughness(base)
    n_links = net.n_pipes + len(net.valves)
    dF1 = sp.csr_matrix((d, (np.arange(net.n_pipes), np.arange(net.n_pipes))),
                        shape=(n_links, net.n_pipes))
    dH, dQ = solver.sensitivities(base, dF1, np.zeros((net.n_junctions, net.n_pipes)))
    for k in (0, 2, 5, 7):  # upstream and zone pipes
        step = 1e-3 * net.roughness[k]
        heads = []
        for sign in (1, -1):
            c = net.roughness.copy()
            c[k] += sign * step
            heads.append(solver.solve(roughness=c).head[: net.n_junctions])
        fd = (heads[0] - heads[1]) / (2 * step)
        np.testing.assert_allclose(dH[:, k], fd, atol=1e-6, rtol=1e-4)
    # the zone's grades do not depend on upstream pipes while the valve is active
    assert np.allclose(dH[4:, :5], 0.0, atol=1e-9)


def test_extra_diagonal_lands_on_its_junction_in_a_reordered_pattern():
    # a star and a path whose minimum-degree ordering is not the identity
    f = np.array([0, 0, 0, 0, 1, 5, 6])
    t = np.array([1, 2, 3, 4, 5, 6, 7])
    pat = SchurPattern(7, f, t, 8)
    assert not np.array_equal(pat.perm, np.arange(7))
    w = np.linspace(1.0, 2.0, len(f))
    extra = np.arange(7) * 10.0
    S = pat.assemble(w, extra).toarray()
    k = np.arange(len(f))
    A = sp.csr_matrix((np.r_[np.ones(7), -np.ones(7)], (np.r_[t, f], np.r_[k, k])),
                      shape=(8, 7)).toarray()[:7]  # A21 over junctions: +1 at to, -1 at from
    dense = A @ np.diag(w) @ A.T + np.diag(extra)  # A21 diag(w) A12 + extra, written out
    np.testing.assert_allclose(S, dense[np.ix_(pat.perm, pat.perm)], atol=1e-12)


def test_a_reducing_valve_whose_inlet_is_cut_off_carries_nothing():
    # V2's inlet D hangs on U3 by one pipe, closed: D is dead. Left active, the valve fed Z4 from
    # D's stale start grade (water from nothing; seen on the demo town with P280 shut). Continuity
    # (common practice): the zone's whole demand, 0.010 m3/s, comes through V1, the one live inlet,
    # and every head equals that of the same network with V2 held closed.
    from calib.network.model import PipeStatus
    junctions = UP_J + ZONE_J + [("D", 20.0, 0.0)]
    pipes = UP_P + ZONE_P + [("C1", "U3", "D", 50.0, 0.2, 100.0)]
    status = np.zeros(len(pipes), dtype=np.int8)
    status[-1] = PipeStatus.CLOSED
    base = build(junctions, [("R", 100.0)], pipes, status=status)

    def rows(mode_v2):
        return [("V1", "U3", "Z1", D_V, ValveType.REDUCING, 30.0 * GAMMA_WATER, ValveMode.ACTIVE,
                 2.0),
                ("V2", "D", "Z4", D_V, ValveType.REDUCING, 40.0 * GAMMA_WATER, mode_v2, 2.0)]

    res = NetworkSolver(with_valves(base, rows(ValveMode.ACTIVE))).solve()
    assert res.isolated == ["D"]
    assert res.valve_state[1] == "closed" and res.valve_flow[1] == 0.0
    assert res.valve_flow[0] == pytest.approx(0.010, rel=1e-6)
    held = NetworkSolver(with_valves(base, rows(ValveMode.CLOSED))).solve()
    live = np.array([i != "D" for i in base.junction_ids])
    nj = base.n_junctions
    np.testing.assert_allclose(res.head[:nj][live], held.head[:nj][live], atol=1e-6)


def test_a_newton_step_balances_a_reducing_valves_inlet_at_once():
    # mass balance is linear in the flows, so an exact Newton step meets it after one step (common
    # practice: Newton's method on the global gradient system, Todini and Pilati 1988); a step
    # that lags the valve's flow change leaves that change as the inlet's mass error
    net = zoned(30.0)
    solver = NetworkSolver(net)
    base = solver.solve()
    res = solver.solve(Snapshot(extra_demand={"Z3": 0.01}), warm_start=base)
    assert res.valve_state[0] == "active"
    assert res.valve_flow[0] - base.valve_flow[0] == pytest.approx(0.01, rel=1e-6)
    mass_after_first_step = solver.trace[1][3]
    assert mass_after_first_step < 1e-9  # lagged: 1e-2 m3/s, the valve's flow change
    cold = NetworkSolver(net).solve(Snapshot(extra_demand={"Z3": 0.01}))
    np.testing.assert_allclose(res.head, cold.head, atol=1e-6)
    np.testing.assert_allclose(res.valve_flow, cold.valve_flow, atol=1e-9)


def test_the_coupled_step_acts_in_a_stack_with_one_column_per_valve_of_a_copy():
    # three disjoint copies (calib.hydraulics.stacked): a unit flow change in one copy moves no
    # grade in another, so the copies' valves share one column (Curtis, Powell and Reid 1974) and
    # the step stays exact at every copy's valve inlet, as for one copy (common practice: Newton)
    from calib.hydraulics.stacked import StackedNetwork
    st = StackedNetwork(zoned(30.0), 3)
    solver = NetworkSolver(st.network)
    assert len(np.unique(solver.pattern.blocks)) == 3
    base = solver.solve()
    hydrants = {st.name(c, "Z3"): 0.01 * (c + 1) for c in range(3)}
    res = solver.solve(Snapshot(extra_demand=hydrants), warm_start=base)
    assert list(res.valve_state) == ["active"] * 3
    np.testing.assert_allclose(res.valve_flow - base.valve_flow, [0.01, 0.02, 0.03], rtol=1e-6)
    assert solver.trace[1][3] < 1e-9  # lagged: 3e-2 m3/s
    for c in range(3):  # each copy as solved alone
        alone = NetworkSolver(zoned(30.0)).solve(Snapshot(extra_demand={"Z3": 0.01 * (c + 1)}))
        np.testing.assert_allclose(res.head[st.junction_map[c]], alone.head[:st.nj], atol=1e-6)


def test_stacked_sensitivities_with_active_valves_match_each_copy_alone():
    # the copies' valves share the sensitivity solve's columns (one per valve of a copy); each
    # copy's dH/dC and dH/d(demand factor) - which moves the valves' flows - must still be its own
    # (implicit differentiation, as for one network)
    from calib.hydraulics.stacked import StackedNetwork
    net = zoned(30.0)
    st = StackedNetwork(net, 3)
    solver = NetworkSolver(st.network)
    hydrants = {st.name(c, "Z3"): 0.005 * (c + 1) for c in range(3)}
    res = solver.solve(Snapshot(extra_demand=hydrants))
    d = solver.dheadloss_droughness(res)
    p = net.n_pipes + 1  # every pipe's C, then the demand factor
    dF1 = np.zeros((st.link_map.size, p))
    for c in range(3):
        dF1[st.pipe_map[c], np.arange(net.n_pipes)] = d[st.pipe_map[c]]
    dF2 = np.zeros((st.junction_map.size, p))
    dF2[:, -1] = -st.network.demand
    dH, dQ = solver.sensitivities(res, dF1, dF2)
    for c in range(3):
        one = NetworkSolver(net)
        alone = one.solve(Snapshot(extra_demand={"Z3": 0.005 * (c + 1)}))
        assert alone.valve_state[0] == "active"
        rows = np.zeros((net.n_pipes + len(net.valves), p))  # links: pipes, then the valve
        rows[np.arange(net.n_pipes), np.arange(net.n_pipes)] = one.dheadloss_droughness(alone)
        cols = np.zeros((net.n_junctions, p))
        cols[:, -1] = -net.demand
        ref, ref_q = one.sensitivities(alone, rows, cols)
        np.testing.assert_allclose(dH[st.junction_map[c]], ref, rtol=1e-6, atol=1e-12)
        np.testing.assert_allclose(dQ[st.valve_map[c]], ref_q[net.n_pipes:], rtol=1e-6,
                                   atol=1e-12)
        assert np.abs(ref_q[net.n_pipes:, -1]).max() > 0  # the valve's flow moves with demand
