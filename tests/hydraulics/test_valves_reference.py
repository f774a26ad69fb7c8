"""Control valves against outside references: each active valve against two ordinary solves
(closed-form at the valve), an inactive valve against an open one, a throttle against a pipe with
the same minor loss. Networks are invented test data in SI units.

Reference for every check here: the valve's defining relation itself (a reducing valve holds
the grade of its downstream node at elevation + setting; a sustaining valve that of its upstream
node; a flow-limiting valve passes its setting), which splits the network into two ordinary
networks solved without valves (common practice in hand analysis of zoned systems). The ordinary
solver is itself checked against closed forms and scipy root finding in test_solver_reference.py.
Tolerance 0.001 ft, as the issue asks.
"""

import numpy as np
import pytest

from calib.hydraulics import NetworkSolver, Snapshot, minor_loss_coefficient
from calib.network.model import Network, ValveMode, Valves, ValveType
from calib.units import GAMMA_WATER

from .conftest import build

FT = 0.3048
TOL = 0.001 * FT  # [m]


def with_valves(net: Network, rows) -> Network:
    """rows: (id, from, to, diameter m, ValveType, setting SI, mode, minor loss K)."""
    idx = net.node_index
    return net.replace(valves=Valves(
        ids=np.array([r[0] for r in rows], dtype=object),
        from_node=[idx[r[1]] for r in rows], to_node=[idx[r[2]] for r in rows],
        diameter=[r[3] for r in rows], kind=[int(r[4]) for r in rows],
        setting=[r[5] for r in rows], mode=[int(r[6]) for r in rows],
        minor_loss=[r[7] for r in rows]))


def heads(net, result):
    return {str(k): h for k, h in zip(net.node_ids, result.head)}


# an upstream loop fed by a reservoir at 100 m, a zone loop 25-30 m lower behind a reducing valve
UP_J = [("U1", 30.0, 0.004), ("U2", 32.0, 0.003), ("U3", 28.0, 0.002), ("U4", 35.0, 0.005)]
UP_P = [("A1", "R", "U1", 400.0, 0.3, 110.0), ("A2", "U1", "U2", 300.0, 0.2, 100.0),
        ("A3", "U2", "U3", 350.0, 0.2, 90.0), ("A4", "U3", "U4", 250.0, 0.15, 120.0),
        ("A5", "U4", "U1", 300.0, 0.2, 100.0)]
ZONE_J = [("Z1", 5.0, 0.001), ("Z2", 3.0, 0.004), ("Z3", 2.0, 0.003), ("Z4", 6.0, 0.002)]
ZONE_P = [("B1", "Z1", "Z2", 300.0, 0.2, 100.0), ("B2", "Z2", "Z3", 300.0, 0.15, 110.0),
          ("B3", "Z3", "Z4", 200.0, 0.15, 90.0), ("B4", "Z4", "Z1", 250.0, 0.2, 120.0)]
D_V = 0.2


def zoned(setting_m, source_head=100.0, mode=ValveMode.ACTIVE, k_open=2.0):
    net = build(UP_J + ZONE_J, [("R", source_head)], UP_P + ZONE_P)
    return with_valves(net, [("V1", "U3", "Z1", D_V, ValveType.REDUCING,
                              setting_m * GAMMA_WATER, mode, k_open)])


def test_active_reducing_valve_equals_two_ordinary_solves():
    setting = 30.0  # m of pressure at Z1 (elevation 5 m): grade 35 m, well below the ~98 m upstream
    net = zoned(setting)
    res = NetworkSolver(net).solve()
    got = heads(net, res)
    assert res.valve_state[0] == "active"
    # zone alone from a fixed grade at the valve's downstream node (elevation + setting)
    h_set = 5.0 + setting
    zone = build(ZONE_J[1:], [("Z1", h_set)], ZONE_P)
    zone_res = NetworkSolver(zone).solve()
    inflow = sum(d for _, _, d in ZONE_J)  # all the zone's demand passes the valve
    # upstream part with the zone's inflow as a demand at the valve's upstream node
    up_j = [(i, z, d + (inflow if i == "U3" else 0.0)) for i, z, d in UP_J]
    up_res = NetworkSolver(build(up_j, [("R", 100.0)], UP_P)).solve()
    for net_ref, res_ref in ((zone, zone_res), (build(up_j, [("R", 100.0)], UP_P), up_res)):
        for node, h in heads(net_ref, res_ref).items():
            assert got[node] == pytest.approx(h, abs=TOL), node
    assert res.valve_flow[0] == pytest.approx(inflow, rel=1e-7)
    assert res.valve_headloss[0] == pytest.approx(got["U3"] - h_set, abs=TOL)
    # zones: the upstream part is the reservoir's, the low zone the valve's
    zone_of = dict(zip(net.junction_ids, res.zone))
    assert {zone_of[j] for j, *_ in UP_J} == {"R"}
    assert {zone_of[j] for j, *_ in ZONE_J} == {"V1"}


def test_inactive_reducing_valve_equals_an_open_valve_and_a_pipe_with_its_minor_loss():
    # setting grade 5 + 200 = 205 m, above the 100 m reservoir: the valve cannot reduce
    net = zoned(200.0, k_open=2.0)
    res = NetworkSolver(net).solve()
    assert res.valve_state[0] == "open"
    held_open = NetworkSolver(zoned(200.0, mode=ValveMode.OPEN)).solve()
    # the valve as a 1 mm pipe of its diameter with the same minor loss K = 2 (friction of 1 mm
    # of pipe below 1e-7 m here; Hazen-Williams C 150)
    pipe_net = build(UP_J + ZONE_J, [("R", 100.0)],
                     UP_P + ZONE_P + [("VP", "U3", "Z1", 0.001, D_V, 150.0)],
                     minor_loss=[0.0] * 9 + [2.0])
    pipe_res = NetworkSolver(pipe_net).solve()
    np.testing.assert_allclose(res.head, held_open.head, atol=TOL)
    np.testing.assert_allclose(res.head, pipe_res.head, atol=TOL)
    assert res.valve_flow[0] == pytest.approx(pipe_res.flow[-1], rel=1e-5)
    k = minor_loss_coefficient(2.0, D_V)  # h = K V^2 / 2g
    assert res.valve_headloss[0] == pytest.approx(k * res.valve_flow[0] ** 2, abs=TOL)


def test_reducing_valve_against_reverse_head_passes_no_flow():
    # the zone has its own reservoir at 120 m, above the 100 m upstream: the valve closes
    net = build(UP_J + ZONE_J, [("R", 100.0), ("RZ", 120.0)],
                UP_P + ZONE_P + [("BZ", "RZ", "Z2", 200.0, 0.3, 120.0)])
    net = with_valves(net, [("V1", "U3", "Z1", D_V, ValveType.REDUCING, 60.0 * GAMMA_WATER,
                             ValveMode.ACTIVE, 2.0)])
    res = NetworkSolver(net).solve()
    assert res.valve_state[0] == "closed"
    assert res.valve_flow[0] == 0.0
    apart = NetworkSolver(build(UP_J + ZONE_J, [("R", 100.0), ("RZ", 120.0)],
                                UP_P + ZONE_P + [("BZ", "RZ", "Z2", 200.0, 0.3, 120.0)])).solve()
    np.testing.assert_allclose(res.head, apart.head, atol=TOL)
    assert res.valve_headloss[0] < 0  # the grade downstream is higher: closed, not reversed


def test_sustaining_valve_equals_two_ordinary_solves():
    # reservoir R (100 m) feeds U1-U4; a sustaining valve from U2 holds 64 m of pressure there
    # (grade 96 m, 1.3 m above its grade fully open) while passing what it can to a low area
    # joined to a second reservoir (60 m)
    down_j = [("D1", 10.0, 0.002), ("D2", 12.0, 0.006)]
    down_p = [("C1", "D1", "D2", 300.0, 0.2, 100.0), ("C2", "RL", "D2", 500.0, 0.3, 100.0)]
    setting = 64.0
    net = build(UP_J + down_j, [("R", 100.0), ("RL", 60.0)], UP_P + down_p)
    net = with_valves(net, [("S1", "U2", "D1", D_V, ValveType.SUSTAINING, setting * GAMMA_WATER,
                             ValveMode.ACTIVE, 2.0)])
    res = NetworkSolver(net).solve()
    got = heads(net, res)
    assert res.valve_state[0] == "active"
    h_set = 32.0 + setting
    assert got["U2"] == pytest.approx(h_set, abs=TOL)
    # upstream alone with U2 held at the setting grade: what reaches U2 beyond its demand passes
    up_j = [j for j in UP_J if j[0] != "U2"]
    up = build(up_j, [("R", 100.0), ("U2", h_set)], UP_P)
    up_res = NetworkSolver(up).solve()
    into_u2 = sum(q if up.node_ids[t] == "U2" else -q
                  for q, f, t in zip(up_res.flow, up.pipe_from, up.pipe_to)
                  if "U2" in (up.node_ids[f], up.node_ids[t]))
    passed = into_u2 - 0.003
    assert res.valve_flow[0] == pytest.approx(passed, rel=1e-6)
    # downstream alone with that flow as a supply at the valve's downstream node
    dn_j = [(i, z, d - (passed if i == "D1" else 0.0)) for i, z, d in down_j]
    dn = build(dn_j, [("RL", 60.0)], down_p)
    dn_res = NetworkSolver(dn).solve()
    for ref, rr in ((up, up_res), (dn, dn_res)):
        for node, h in heads(ref, rr).items():
            assert got[node] == pytest.approx(h, abs=TOL), node


def _fcv_net(q_set, mode=ValveMode.ACTIVE):
    # a high reservoir (100 m) and a low one (40 m) joined through a flow-limiting valve
    j = [("J1", 10.0, 0.002), ("J2", 10.0, 0.001), ("J3", 5.0, 0.003)]
    p = [("P1", "R", "J1", 500.0, 0.3, 120.0), ("P2", "J2", "J3", 400.0, 0.25, 110.0),
         ("P3", "J3", "RL", 300.0, 0.25, 110.0)]
    net = build(j, [("R", 100.0), ("RL", 40.0)], p)
    return with_valves(net, [("F1", "J1", "J2", 0.25, ValveType.FLOW_LIMITING, q_set, mode,
                              1.0)]), j, p


def test_flow_limiting_valve_equals_two_ordinary_solves():
    q_set = 0.02  # m3/s (317 gpm), well below the ~0.1 m3/s the 60 m drop would drive
    net, j, p = _fcv_net(q_set)
    res = NetworkSolver(net).solve()
    assert res.valve_state[0] == "active"
    assert res.valve_flow[0] == pytest.approx(q_set, rel=1e-12)
    got = heads(net, res)
    up = build([("J1", 10.0, 0.002 + q_set)], [("R", 100.0)], [p[0]])
    dn = build([("J2", 10.0, 0.001 - q_set), ("J3", 5.0, 0.003)], [("RL", 40.0)], p[1:])
    for ref in (up, dn):
        for node, h in heads(ref, NetworkSolver(ref).solve()).items():
            assert got[node] == pytest.approx(h, abs=TOL), node
    assert res.valve_headloss[0] == pytest.approx(got["J1"] - got["J2"], abs=1e-12)


def test_flow_limiting_valve_above_its_flow_is_an_open_valve():
    big, _, _ = _fcv_net(1.0)  # 1 m3/s: never reached
    res = NetworkSolver(big).solve()
    assert res.valve_state[0] == "open"
    held, _, _ = _fcv_net(1.0, mode=ValveMode.OPEN)
    np.testing.assert_allclose(res.head, NetworkSolver(held).solve().head, atol=TOL)


def test_throttle_equals_a_pipe_with_the_same_minor_loss():
    j = [("J1", 10.0, 0.003), ("J2", 10.0, 0.0), ("J3", 8.0, 0.004)]
    p = [("P1", "R", "J1", 500.0, 0.2, 110.0), ("P2", "J2", "J3", 400.0, 0.15, 100.0)]
    net = with_valves(build(j, [("R", 60.0)], p),
                      [("T1", "J1", "J2", 0.15, ValveType.THROTTLE, 40.0, ValveMode.ACTIVE, 0.5)])
    res = NetworkSolver(net).solve()
    assert res.valve_state[0] == "active"
    # the same main with K = 40 (the throttle's setting) on pipe P2 of the valve's diameter
    ref = build([j[0], j[2]], [("R", 60.0)],
                [p[0], ("P2", "J1", "J3", 400.0, 0.15, 100.0)], minor_loss=[0.0, 40.0])
    ref_res = NetworkSolver(ref).solve()
    got = heads(net, res)
    for node, h in heads(ref, ref_res).items():
        assert got[node] == pytest.approx(h, abs=TOL), node
    # a throttle held open has its minor loss 0.5 instead: less loss, higher grade at J3
    opened = with_valves(build(j, [("R", 60.0)], p),
                         [("T1", "J1", "J2", 0.15, ValveType.THROTTLE, 40.0, ValveMode.OPEN, 0.5)])
    assert heads(opened, NetworkSolver(opened).solve())["J3"] > got["J3"] + 0.1


def test_reducing_valve_with_demand_factor_and_warm_start_stays_on_setting():
    net = zoned(30.0)
    solver = NetworkSolver(net)
    snaps = [Snapshot(demand_factor=f) for f in (0.5, 1.0, 2.5, 1.2)]
    for res in solver.solve_many(snaps):
        z1 = net.node_index["Z1"]
        assert res.head[z1] == pytest.approx(35.0, abs=TOL)
        assert res.valve_state[0] == "active"
