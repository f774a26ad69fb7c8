"""The held-node option of the solver (Snapshot.held_head): a junction at a fixed grade, its draw an output."""

import numpy as np
import pytest
from scipy.optimize import brentq

from calib.errors import InputError
from calib.hydraulics import NetworkSolver, Snapshot, hazen_williams_resistance
from calib.units import GAMMA_WATER, PSI

from tests.hydraulics.conftest import build, random_looped


def test_single_pipe_matches_hazen_williams_closed_form():
    # reservoir 60 m - 600 m of 200 mm, C 110 - hydrant at 5 m held at 20 psi; no other demand.
    # Closed form: Q = ((H_R - H_held) / r)^(1/1.852), r = 10.67 L / (C^1.852 D^4.8704)
    # (Hazen-Williams SI form; shared/reference/check-values.md, "Hazen-Williams, SI").
    net = build([("H", 5.0, 0.0)], [("R", 60.0)], [("P", "R", "H", 600.0, 0.2, 110.0)])
    held = 5.0 + 20 * PSI / GAMMA_WATER
    res = NetworkSolver(net).solve(Snapshot(held_head={"H": held}))
    r = 10.67 * 600.0 / (110.0 ** 1.852 * 0.2 ** 4.8704)
    expected = ((60.0 - held) / r) ** (1 / 1.852)
    assert res.held_flow["H"] == pytest.approx(expected, rel=1e-6)
    assert res.pressure[0] == pytest.approx(20 * PSI, rel=1e-9)


@pytest.mark.parametrize("seed", [3, 11])
def test_held_flow_equals_root_search_on_the_solver(seed):
    # reference: scipy.optimize.brentq on the pressure at the node against an added demand
    net = random_looped(40, seed, n_sources=2)
    solver = NetworkSolver(net)
    node = "J27"
    i = net.node_index[node]
    static = solver.solve().pressure[i]
    target = 0.5 * static
    held = solver.solve(Snapshot(held_head={node: net.elevation[i] + target / GAMMA_WATER}))
    q = brentq(lambda d: solver.solve(Snapshot(extra_demand={node: d})).pressure[i] - target,
               0.0, 2.0, xtol=1e-12, rtol=1e-12)
    assert held.held_flow[node] == pytest.approx(q, rel=1e-6)
    # every other junction sees the same state as with that demand added
    plain = solver.solve(Snapshot(extra_demand={node: q}))
    assert np.allclose(held.pressure, plain.pressure, atol=1e-3)


def test_sensitivity_of_held_flow_matches_finite_differences():
    # d(draw)/dC from the implicit derivative (grade held) against central differences on C
    net = random_looped(30, 5)
    solver = NetworkSolver(net)
    node = "J20"
    i = net.node_index[node]
    snap = Snapshot(held_head={node: net.elevation[i] + 20 * PSI / GAMMA_WATER})
    res = solver.solve(snap)
    k = 7
    dF1 = np.zeros((net.n_pipes, 1))
    dF1[k, 0] = solver.dheadloss_droughness(res)[k]
    _, dQ = solver.sensitivities(res, dF1, np.zeros((net.n_junctions, 1)))
    analytic = solver.pattern.inflow(dQ[:, 0])[i]
    h = 1e-3 * net.roughness[k]
    draws = []
    for sign in (1, -1):
        c = net.roughness.copy()
        c[k] += sign * h
        draws.append(solver.solve(snap, roughness=c).held_flow[node])
    assert analytic == pytest.approx((draws[0] - draws[1]) / (2 * h), rel=1e-4)
    assert abs(analytic) > 0  # the pipe carries flow to the hydrant: a real derivative


def test_held_head_on_a_source_or_unknown_node_is_refused():
    net = build([("H", 5.0, 0.0)], [("R", 60.0)], [("P", "R", "H", 600.0, 0.2, 110.0)])
    with pytest.raises(InputError) as err:
        NetworkSolver(net).solve(Snapshot(held_head={"R": 50.0, "X": 1.0, "H": float("nan")}))
    text = str(err.value)
    assert "'R'" in text and "'X'" in text and "held grade" in text


def test_extra_diagonal_and_hold_land_on_their_junction_under_the_ordering():
    # the pattern's fill-reducing ordering permutes junctions; a held (or cut-off) junction's row
    # must be the one cleared, whatever the ordering (closed-form check: S = A21 diag(w) A12)
    net = random_looped(30, 5)
    solver = NetworkSolver(net)
    pat = solver.pattern
    assert not np.array_equal(pat.perm, np.arange(pat.n))  # a real permutation
    w = np.linspace(1.0, 2.0, len(solver.link_from))
    nj = net.n_junctions
    A = np.zeros((nj, len(w)))  # incidence restricted to junctions: +1 at to, -1 at from
    for k, (a, b) in enumerate(zip(solver.link_from, solver.link_to)):
        if b < nj:
            A[b, k] += 1
        if a < nj:
            A[a, k] -= 1
    dense = A @ np.diag(w) @ A.T
    fixed = np.zeros(nj, dtype=bool)
    fixed[[3, 20]] = True
    S = pat.hold(pat.assemble(w, fixed.astype(float)), fixed)
    back = S.toarray()[np.ix_(pat.inv, pat.inv)]  # to old junction order
    expected = dense.copy()
    expected[fixed, :] = 0.0
    expected[:, fixed] = 0.0
    expected[fixed, fixed] = dense[fixed, fixed] + 1.0
    assert np.allclose(back, expected)
