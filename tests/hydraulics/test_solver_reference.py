"""The solver against outside references: closed forms, handbook values, published networks and an
independent formulation (nodal heads by scipy.optimize.root)."""

import numpy as np
import pytest
from scipy.optimize import brentq, root

from calib.hydraulics import NetworkSolver, Snapshot, hazen_williams_resistance
from calib.units import FT, GPM, INCH

HEAD_TOL = 0.001 * FT  # issue 2 section 5: heads within 0.001 ft


def test_one_pipe_between_two_reservoirs_closed_form(make):
    # closed form (Hazen-Williams solved for Q): Q = (dH / r)^(1/1.852)
    length, d, c, h1, h2 = 800.0, 0.25, 110.0, 70.0, 52.0
    net = make([], [("A", h1), ("B", h2)], [("P", "A", "B", length, d, c)])
    res = NetworkSolver(net).solve()
    r = 10.67 * length / (c ** 1.852 * d ** 4.8704)
    assert res.flow[0] == pytest.approx(((h1 - h2) / r) ** (1 / 1.852), rel=1e-9)
    assert res.headloss[0] == pytest.approx(h1 - h2, abs=1e-7)


def test_handbook_pipe_in_a_network(make):
    # check-values.md, Hazen-Williams table [C]: 8 in, C 100, 1000 ft, 1000 gpm -> 29.674 ft (SI form)
    net = make([("J", 0.0, 1000 * GPM)], [("R", 100.0)], [("P", "R", "J", 1000 * FT, 8 * INCH, 100)])
    res = NetworkSolver(net).solve()
    assert (100.0 - res.head[0]) / FT == pytest.approx(29.674, abs=0.0006)
    assert res.flow[0] == pytest.approx(1000 * GPM, rel=1e-12)  # continuity at a dead end


def test_three_reservoirs_against_brentq(make):
    # the classic three-reservoir problem: junction grade by scipy.optimize.brentq on continuity
    heads = {"A": 100.0, "B": 80.0, "C": 60.0}
    pipes = [("PA", "A", "J", 1500.0, 0.3, 120.0), ("PB", "J", "B", 1000.0, 0.25, 100.0),
             ("PC", "J", "C", 2000.0, 0.2, 90.0)]
    demand = 0.01
    net = make([("J", 20.0, demand)], [(k, v) for k, v in heads.items()], pipes)
    res = NetworkSolver(net).solve()

    def q(hi, hj, length, d, c):  # flow hi -> hj by Hazen-Williams
        dh = hi - hj
        return np.sign(dh) * (abs(dh) / hazen_williams_resistance(length, d, c)) ** (1 / 1.852)

    def continuity(hj):
        return (q(heads["A"], hj, 1500.0, 0.3, 120.0) - q(hj, heads["B"], 1000.0, 0.25, 100.0)
                - q(hj, heads["C"], 2000.0, 0.2, 90.0) - demand)

    hj = brentq(continuity, 60.0, 100.0, xtol=1e-12)
    assert res.head[0] == pytest.approx(hj, abs=1e-6)
    assert res.flow[1] == pytest.approx(q(hj, 80.0, 1000.0, 0.25, 100.0), rel=1e-6)


def _nodal_root(net, demand):
    """Independent method: unknown junction heads, pipe flows from the inverted Hazen-Williams law,
    continuity residual at each junction solved by scipy.optimize.root (Powell hybrid)."""
    nj = net.n_junctions
    r = hazen_williams_resistance(net.length, net.diameter, net.roughness)
    f, t = net.pipe_from, net.pipe_to

    def flows(hj):
        h = np.concatenate([hj, net.source_head])
        dh = h[f] - h[t]
        return np.sign(dh) * (np.abs(dh) / r) ** (1 / 1.852)

    def residual(hj):
        q = flows(hj)
        inflow = np.bincount(t, q, net.n_nodes) - np.bincount(f, q, net.n_nodes)
        return (inflow[:nj] - demand) * 1e3  # scaled to L/s so the tolerance is meaningful

    # start: heads of a linear law Q = G dh with G from 1 ft/s (dense numpy solve); a flat start
    # stalls Powell's method where the inverted law is steep near dh = 0
    q0 = FT * np.pi * net.diameter ** 2 / 4
    g = 1 / (r * q0 ** 0.852)
    lap = np.zeros((net.n_nodes, net.n_nodes))
    np.add.at(lap, (f, f), g)
    np.add.at(lap, (t, t), g)
    np.add.at(lap, (f, t), -g)
    np.add.at(lap, (t, f), -g)
    guess = np.linalg.solve(lap[:nj, :nj], -demand - lap[:nj, nj:] @ net.source_head)
    sol = root(residual, guess, method="hybr", options={"xtol": 1e-13, "maxfev": 200000})
    assert sol.success, sol.message
    return sol.x, flows(sol.x)


@pytest.mark.parametrize("n,seed,sources", [(12, 1, 1), (40, 2, 1), (80, 3, 2), (150, 4, 2)])
def test_random_looped_networks_against_nodal_root(make_random, n, seed, sources):
    # issue 2 section 5: heads within 0.001 ft, mass balance within 1e-6 of the total demand
    net = make_random(n, seed, n_sources=sources)
    assert net.n_pipes >= n  # looped: more pipes than a tree
    res = NetworkSolver(net).solve()
    h_ref, q_ref = _nodal_root(net, net.demand)
    np.testing.assert_allclose(res.head[: net.n_junctions], h_ref, atol=HEAD_TOL, rtol=0)
    total = net.demand.sum()
    inflow = (np.bincount(net.pipe_to, res.flow, net.n_nodes)
              - np.bincount(net.pipe_from, res.flow, net.n_nodes))[: net.n_junctions]
    assert np.abs(inflow - net.demand).max() <= 1e-6 * total
    assert res.max_mass_error <= 1e-6 * total
    # flows agree too, relative to the total demand
    assert np.abs(res.flow - q_ref).max() <= 1e-5 * total


def test_random_looped_network_of_a_few_hundred_pipes(make_random):
    # the larger size of the section 5 check, nodal root on 200 junctions and 300 pipes
    net = make_random(200, 11, extra_loops=100, n_sources=1)
    assert net.n_pipes == 300
    res = NetworkSolver(net).solve()
    h_ref, _ = _nodal_root(net, net.demand)
    np.testing.assert_allclose(res.head[: net.n_junctions], h_ref, atol=HEAD_TOL, rtol=0)


def test_two_loop_network_recomputed_pressures(two_loop):
    # check-values.md: Alperovits and Shamir (1977) two-loop network, least-cost diameters, pressure
    # heads recomputed with alpha 10.667 and D^4.871: 53.247, 30.462, 43.449, 33.803, 30.445, 30.552 m.
    # We emulate those two constants exactly by an equivalent C per pipe: r is then identical.
    net = two_loop
    d = net.diameter
    c_equiv = net.roughness * (10.67 / 10.667 * d ** (4.871 - 4.8704)) ** (1 / 1.852)
    res = NetworkSolver(net).solve(roughness=c_equiv)
    pressure_head = res.head[:6] - net.elevation[:6]
    np.testing.assert_allclose(pressure_head, [53.247, 30.462, 43.449, 33.803, 30.445, 30.552],
                               atol=0.0006)  # printed to 0.001 m
    assert res.flow[0] * 3600 == pytest.approx(1120, rel=1e-9)  # all demand passes pipe 1-2


def test_two_loop_network_with_our_constants(two_loop):
    # the same, as recalled to 0.01 m (53.25, 30.46, 43.45, 33.80, 30.44, 30.55) [M]; with our SI
    # constants (10.67, D^4.8704) head losses move by ~0.1 %, i.e. up to ~0.02 m here
    res = NetworkSolver(two_loop).solve()
    pressure_head = res.head[:6] - two_loop.elevation[:6]
    np.testing.assert_allclose(pressure_head, [53.25, 30.46, 43.45, 33.80, 30.44, 30.55], atol=0.03)


def test_c_scaling_property(make_random):
    # check-values.md, exact property: one source, fixed demands, all C x k -> same flows,
    # head losses x k^-1.852 (k = 1.1: 0.8381867)
    net = make_random(60, 5, n_sources=1)
    solver = NetworkSolver(net)
    base = solver.solve()
    scaled = solver.solve(roughness=net.roughness * 1.1)
    total = net.demand.sum()
    assert np.abs(scaled.flow - base.flow).max() <= 1e-8 * total
    big = np.abs(base.headloss) > 1e-3
    np.testing.assert_allclose(scaled.headloss[big] / base.headloss[big], 0.8381867, rtol=1e-6)
    assert 1.1 ** -1.852 == pytest.approx(0.8381867, abs=1e-7)


def test_darcy_weisbach_one_pipe_against_fluids_colebrook(make):
    # reference library: fluids.friction.Colebrook inside brentq on h = f L/D V^2/(2g)
    fluids = pytest.importorskip("fluids")
    from calib.hydraulics.headloss import NU_WATER_60F
    from calib.units import G
    length, d, e, h1, h2 = 600.0, 0.2, 2.6e-4, 40.0, 31.0
    net = make([], [("A", h1), ("B", h2)], [("P", "A", "B", length, d, 100.0)],
               roughness_height=[e])
    res = NetworkSolver(net, headloss="darcy-weisbach").solve()

    def excess(q):
        v = q / (np.pi * d ** 2 / 4)
        re = v * d / NU_WATER_60F
        return fluids.friction.Colebrook(re, e / d) * length / d * v ** 2 / (2 * G) - (h1 - h2)

    q_ref = brentq(excess, 1e-4, 1.0, xtol=1e-14)
    assert res.flow[0] == pytest.approx(q_ref, rel=1e-8)


def test_minor_loss_against_brentq(make):
    # closed form: Hazen-Williams plus K V^2/2g equals the available head; root by brentq
    from calib.units import G
    length, d, c, k = 300.0, 0.15, 120.0, 12.0
    net = make([], [("A", 50.0), ("B", 40.0)], [("P", "A", "B", length, d, c)], minor_loss=[k])
    res = NetworkSolver(net).solve()
    r = hazen_williams_resistance(length, d, c)

    def excess(q):
        v = q / (np.pi * d ** 2 / 4)
        return r * q ** 1.852 + k * v ** 2 / (2 * G) - 10.0

    assert res.flow[0] == pytest.approx(brentq(excess, 1e-6, 1.0, xtol=1e-15), rel=1e-9)


def test_pump_between_reservoirs_against_brentq(make):
    # closed form: pump gain s^2 (h0 - r (q/s)^n) equals lift plus pipe loss; root by brentq
    h0, rp, n, s = 40.0, 2000.0, 2.0, 0.9
    length, d, c = 500.0, 0.2, 110.0
    net = make([("J", 0.0, 0.0)], [("LOW", 10.0), ("HIGH", 30.0)],
               [("P", "J", "HIGH", length, d, c)], pumps=[("PU", "LOW", "J", h0, rp, n, s)])
    res = NetworkSolver(net).solve()
    r = hazen_williams_resistance(length, d, c)

    def excess(q):
        return s ** 2 * (h0 - rp * (q / s) ** n) - (20.0 + r * q ** 1.852)

    q_ref = brentq(excess, 1e-6, 0.2, xtol=1e-15)
    assert res.pump_flow[0] == pytest.approx(q_ref, rel=1e-8)
    assert res.flow[0] == pytest.approx(q_ref, rel=1e-8)


@pytest.mark.parametrize("n,seed", [(12, 3), (20, 15), (25, 4)])  # seeds with turbulent flow
def test_darcy_weisbach_looped_network_against_nodal_root(make_random, n, seed):
    # independent method: nodal heads by scipy.optimize.root, pipe flows from the explicit inverse
    # of Colebrook for a known head loss, V = -2 sqrt(2 g D S) log10(e/3.7D + 2.51 nu/(D sqrt(2 g D S)))
    # (exact rearrangement of Colebrook 1939; valid in turbulent flow, asserted below)
    from calib.hydraulics.headloss import NU_WATER_60F, reynolds_number
    from calib.units import G
    net = make_random(n, seed, n_sources=2)
    net = net.replace(demand=net.demand * 6, roughness_height=np.full(net.n_pipes, 2.6e-4))
    res = NetworkSolver(net, headloss="darcy-weisbach").solve()
    assert np.all(reynolds_number(res.flow, net.diameter) > 4000)  # Colebrook's range
    nj, f, t = net.n_junctions, net.pipe_from, net.pipe_to
    d, length, e = net.diameter, net.length, net.roughness_height

    def flows(hj):
        h = np.concatenate([hj, net.source_head])
        dh = h[f] - h[t]
        s = np.maximum(np.abs(dh), 1e-12) / length
        root_term = np.sqrt(2 * G * d * s)
        v = -2 * root_term * np.log10(e / (3.7 * d) + 2.51 * NU_WATER_60F / (d * root_term))
        return np.sign(dh) * v * np.pi * d ** 2 / 4

    def residual(hj):
        q = flows(hj)
        inflow = np.bincount(t, q, net.n_nodes) - np.bincount(f, q, net.n_nodes)
        return (inflow[:nj] - net.demand) * 1e3

    # start a few metres off our answer in a random direction: root must find its own way
    start = res.head[:nj] + np.random.default_rng(0).uniform(-2, 2, nj)
    sol = root(residual, start, method="hybr", options={"xtol": 1e-13})
    assert sol.success, sol.message
    np.testing.assert_allclose(res.head[:nj], sol.x, atol=HEAD_TOL, rtol=0)
