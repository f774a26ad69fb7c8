"""Solver behaviour: statuses, snapshots, derivatives, failures; each against an independent result."""

import numpy as np
import pytest

from calib.errors import ConvergenceError, InputError, NetworkError
from calib.hydraulics import NetworkSolver, Snapshot
from calib.network.model import PipeStatus


def _drop_pipe(net, k):
    keep = np.arange(net.n_pipes) != k
    return net.replace(pipe_ids=net.pipe_ids[keep], pipe_from=net.pipe_from[keep],
                       pipe_to=net.pipe_to[keep], length=net.length[keep],
                       diameter=net.diameter[keep], roughness=net.roughness[keep],
                       minor_loss=net.minor_loss[keep], status=net.status[keep],
                       roughness_height=net.roughness_height[keep], group=net.group[keep],
                       material=net.material[keep], installed=net.installed[keep])


def test_closed_pipe_carries_no_flow_and_equals_removing_it(make_random):
    # closed form: a closed pipe is the same network without that pipe
    net = make_random(40, 7)
    k = 45  # a loop pipe, so the network stays connected
    status = net.status.copy()
    status[k] = PipeStatus.CLOSED
    res = NetworkSolver(net.replace(status=status)).solve()
    ref = NetworkSolver(_drop_pipe(net, k)).solve()
    assert res.flow[k] == 0.0 and res.headloss[k] == 0.0
    assert str(net.pipe_ids[k]) in res.closed_links
    np.testing.assert_allclose(res.head, ref.head, atol=1e-7)
    np.testing.assert_allclose(np.delete(res.flow, k), ref.flow, atol=1e-9)


def test_check_valve_blocks_reverse_flow(make):
    # closed form: a check valve against the gradient passes nothing; with it, it is an open pipe
    pipes = [("P", "B", "A", 800.0, 0.25, 110.0)]  # from the low to the high reservoir
    status = [PipeStatus.CHECK_VALVE]
    blocked = NetworkSolver(make([], [("A", 70.0), ("B", 52.0)], pipes, status=status)).solve()
    assert blocked.flow[0] == 0.0 and "P" in blocked.closed_links
    forward = make([], [("A", 52.0), ("B", 70.0)], pipes, status=status)
    open_pipe = make([], [("A", 52.0), ("B", 70.0)], pipes)
    assert NetworkSolver(forward).solve().flow[0] == pytest.approx(
        NetworkSolver(open_pipe).solve().flow[0], rel=1e-12)


def test_check_valve_in_a_loop_closes_and_equals_removing_it(make_random):
    # a check valve set against the flow it would carry ends closed: same as the pipe removed
    net = make_random(40, 8)
    base = NetworkSolver(net).solve()
    k = 50
    # orient the check valve against the open-pipe flow so it must close
    flip = base.flow[k] > 0
    f, t = net.pipe_from.copy(), net.pipe_to.copy()
    if flip:
        f[k], t[k] = t[k], f[k]
    status = net.status.copy()
    status[k] = PipeStatus.CHECK_VALVE
    res = NetworkSolver(net.replace(pipe_from=f, pipe_to=t, status=status)).solve()
    assert res.flow[k] == 0.0
    ref = NetworkSolver(_drop_pipe(net, k)).solve()
    np.testing.assert_allclose(res.head, ref.head, atol=1e-7)
    # the valve holds: head is higher at its downstream end (closed form of a closed check valve)
    assert res.head[f[k]] <= res.head[t[k]] + 1e-9


def test_sparse_and_dense_solves_agree(make_random):
    # cross-check: the same Newton iteration with a dense Cholesky (scipy.linalg.cho_factor)
    net = make_random(60, 9, n_sources=2)
    sparse = NetworkSolver(net).solve()
    dense = NetworkSolver(net, dense=True).solve()
    np.testing.assert_allclose(sparse.head, dense.head, atol=1e-8)
    # the sparse path may finish with preconditioned CG steps, exact to the mass tolerance
    np.testing.assert_allclose(sparse.flow, dense.flow, atol=1e-9)
    exact = NetworkSolver(net, reuse_factor=False).solve()
    np.testing.assert_allclose(exact.head, dense.head, atol=1e-9)
    np.testing.assert_allclose(exact.flow, dense.flow, atol=1e-11)


def _fd(solver, make_snapshot, roughness_at, p0, step):
    plus = solver.solve(make_snapshot(p0 + step), roughness=roughness_at(p0 + step))
    minus = solver.solve(make_snapshot(p0 - step), roughness=roughness_at(p0 - step))
    nj = solver.network.n_junctions
    return ((plus.head[:nj] - minus.head[:nj]) / (2 * step),
            (plus.link_flow - minus.link_flow) / (2 * step))


def test_sensitivity_to_a_group_c_against_finite_differences(make_random):
    # common practice: implicit-differentiation derivatives against central differences
    net = make_random(50, 10, n_sources=2)
    solver = NetworkSolver(net)
    res = solver.solve()
    group = np.zeros(net.n_pipes, dtype=bool)
    group[::3] = True  # one C factor multiplies this group
    dh_dc = solver.dheadloss_droughness(res)
    # parameter k: C_group = k * C0; dF1/dk = dh/dC * C0 on the group
    b1 = np.where(group, dh_dc * net.roughness, 0.0)[:, None]
    dH, dQ = solver.sensitivities(res, b1, np.zeros((net.n_junctions, 1)))

    def rough(k):
        return np.where(group, k * net.roughness, net.roughness)

    fd_h, fd_q = _fd(solver, lambda k: None, rough, 1.0, 1e-4)
    np.testing.assert_allclose(dH[:, 0], fd_h, atol=1e-6 * np.abs(fd_h).max())
    np.testing.assert_allclose(dQ[:, 0], fd_q, atol=1e-6 * np.abs(fd_q).max())
    assert np.abs(fd_h).max() > 0.1  # the check has something to check


def test_sensitivity_to_demand_factor_and_source_head(make_random):
    # contract (DEVELOPERS.md): demand factor dF2 = -base demand; source head s: dF1 = -1 where
    # from = s, +1 where to = s. Against central differences (common practice).
    net = make_random(50, 12, n_sources=2)
    solver = NetworkSolver(net)
    res = solver.solve()
    s = net.n_junctions  # first source
    b1 = np.zeros((net.n_pipes, 2))
    b1[net.pipe_from == s, 1] = -1.0
    b1[net.pipe_to == s, 1] = 1.0
    b2 = np.zeros((net.n_junctions, 2))
    b2[:, 0] = -net.demand
    dH, dQ = solver.sensitivities(res, b1, b2)
    fd_h, fd_q = _fd(solver, lambda x: Snapshot(demand_factor=x), lambda x: None, 1.0, 1e-4)
    np.testing.assert_allclose(dH[:, 0], fd_h, atol=1e-6 * np.abs(fd_h).max())
    np.testing.assert_allclose(dQ[:, 0], fd_q, atol=1e-6 * np.abs(fd_q).max())
    head0 = float(net.source_head[0])
    fd_h, fd_q = _fd(solver, lambda x: Snapshot(source_head={"R0": x}), lambda x: None, head0, 1e-3)
    np.testing.assert_allclose(dH[:, 1], fd_h, atol=1e-6 * np.abs(fd_h).max())
    np.testing.assert_allclose(dQ[:, 1], fd_q, atol=1e-6 * np.abs(fd_q).max())


def test_sensitivities_accept_sparse_columns(make_random):
    import scipy.sparse as sp
    net = make_random(30, 13)
    solver = NetworkSolver(net)
    res = solver.solve()
    d = solver.dheadloss_droughness(res)
    b1 = sp.csr_matrix(np.diag(d)[:, :5])
    dense = solver.sensitivities(res, b1.toarray(), np.zeros((net.n_junctions, 5)))
    sparse = solver.sensitivities(res, b1, sp.csr_matrix((net.n_junctions, 5)))
    np.testing.assert_allclose(sparse[0], dense[0], rtol=1e-12, atol=1e-15)


def test_dheadloss_droughness_hazen_williams_closed_form(make_random):
    # check-values.md: dh_k/dC_k = -1.852 h_k / C_k for Hazen-Williams (no minor losses here)
    net = make_random(20, 14)
    solver = NetworkSolver(net)
    res = solver.solve()
    np.testing.assert_allclose(solver.dheadloss_droughness(res),
                               -1.852 * res.headloss / net.roughness, rtol=1e-12, atol=1e-18)


def test_darcy_weisbach_sensitivity_to_roughness_height(make):
    # central differences (common practice) on the roughness height of one DW pipe
    net = make([("J", 0.0, 0.02)], [("A", 40.0), ("B", 38.0)],
               [("P1", "A", "J", 400.0, 0.2, 100.0), ("P2", "B", "J", 300.0, 0.15, 100.0)],
               roughness_height=[2.6e-4, 1e-4])
    solver = NetworkSolver(net, headloss="darcy-weisbach")
    res = solver.solve()
    d = solver.dheadloss_droughness(res)
    b1 = np.array([[d[0]], [0.0]])
    dH, _ = solver.sensitivities(res, b1, np.zeros((1, 1)))
    step = 1e-6
    plus = solver.solve(roughness=np.array([2.6e-4 + step, 1e-4])).head[0]
    minus = solver.solve(roughness=np.array([2.6e-4 - step, 1e-4])).head[0]
    assert dH[0, 0] == pytest.approx((plus - minus) / (2 * step), rel=1e-5)


def test_non_convergent_case_names_nodes_and_pipes(make_random):
    net = make_random(60, 15)
    with pytest.raises(ConvergenceError) as info:
        NetworkSolver(net, max_iterations=2).solve()
    err = info.value
    assert err.iterations == 2
    assert len(err.worst_nodes) == 5 and len(err.worst_links) == 5
    assert all(n in str(err) for n in err.worst_nodes)
    assert all(k in str(err) for k in err.worst_links)
    assert "no convergence in 2 iterations" in str(err)


def test_junction_cut_off_with_demand_is_named(make):
    net = make([("J1", 0.0, 0.0), ("J2", 0.0, 0.01)], [("R", 50.0)],
               [("P1", "R", "J1", 100.0, 0.2, 100.0), ("P2", "J1", "J2", 100.0, 0.2, 100.0)],
               status=[PipeStatus.OPEN, PipeStatus.CLOSED])
    with pytest.raises(NetworkError, match="J2"):
        NetworkSolver(net).solve()


def test_idle_dead_end_is_reported_isolated(make):
    net = make([("J1", 0.0, 0.01), ("J2", 3.0, 0.0)], [("R", 50.0)],
               [("P1", "R", "J1", 100.0, 0.2, 100.0), ("P2", "J1", "J2", 100.0, 0.2, 100.0)],
               status=[PipeStatus.OPEN, PipeStatus.CLOSED])
    res = NetworkSolver(net).solve()
    assert res.isolated == ["J2"] and res.pressure[1] == 0.0
    assert np.all(np.isfinite(res.head))


def test_dead_end_with_no_demand_converges_with_zero_flow(make):
    # the regularization's purpose: an idle dead end converges, its flow is exactly what mass gives
    net = make([("J1", 0.0, 0.01), ("J2", 3.0, 0.0)], [("R", 50.0)],
               [("P1", "R", "J1", 100.0, 0.2, 100.0), ("P2", "J1", "J2", 100.0, 0.2, 100.0)])
    res = NetworkSolver(net).solve()
    # zero within the absolute mass tolerance (1e-9 m3/s)
    assert abs(res.flow[1]) <= 1e-9 and res.head[1] == pytest.approx(res.head[0], abs=1e-6)


def test_negative_pressures_are_reported(make):
    net = make([("LOW", 0.0, 0.01), ("HILL", 60.0, 0.0)], [("R", 50.0)],
               [("P1", "R", "LOW", 100.0, 0.2, 100.0), ("P2", "LOW", "HILL", 100.0, 0.2, 100.0)])
    res = NetworkSolver(net).solve()
    assert res.negative_pressure == ["HILL"]
    from calib.units import GAMMA_WATER
    assert res.pressure[1] == pytest.approx(GAMMA_WATER * (res.head[1] - 60.0), rel=1e-12)


def test_snapshot_extra_demand_factor_and_source_head(make):
    # closed form on one pipe: head drop = r Q^1.852 with Q = factor x base + extra
    from calib.hydraulics import hazen_williams_resistance
    net = make([("J", 0.0, 0.01)], [("R", 50.0)], [("P", "R", "J", 500.0, 0.2, 100.0)])
    res = NetworkSolver(net).solve(Snapshot(demand_factor=1.5, extra_demand={"J": 0.02},
                                            source_head={"R": 47.0}, label="t1"))
    r = hazen_williams_resistance(500.0, 0.2, 100.0)
    assert res.flow[0] == pytest.approx(0.035, rel=1e-12)
    assert res.head[0] == pytest.approx(47.0 - r * 0.035 ** 1.852, abs=1e-8)
    assert res.snapshot.label == "t1"


def test_snapshot_names_are_validated(make):
    net = make([("J", 0.0, 0.01)], [("R", 50.0)], [("P", "R", "J", 500.0, 0.2, 100.0)])
    solver = NetworkSolver(net)
    with pytest.raises(InputError) as info:
        solver.solve(Snapshot(extra_demand={"H99": 0.01, "R": 0.01}, source_head={"J": 40.0}))
    text = str(info.value)
    assert "3 problems" in text and "'H99'" in text and "'R'" in text and "'J'" in text
    with pytest.raises(InputError, match="demand factor"):
        solver.solve(Snapshot(demand_factor=float("nan")))


def test_solve_many_matches_single_solves_and_warm_starts(make_random):
    net = make_random(80, 16, n_sources=2)
    solver = NetworkSolver(net)
    snaps = [Snapshot(demand_factor=f, extra_demand={"J7": 0.01 * f}) for f in
             (0.8, 0.9, 1.0, 1.1, 1.2)]
    many = solver.solve_many(snaps)
    single = [solver.solve(s) for s in snaps]
    for a, b in zip(many, single):
        np.testing.assert_allclose(a.head, b.head, atol=1e-7)
    assert sum(r.iterations for r in many[1:]) < sum(r.iterations for r in single[1:])


def test_darcy_weisbach_needs_roughness_height(make):
    net = make([("J", 0.0, 0.01)], [("R", 50.0)],
               [("P1", "R", "J", 500.0, 0.2, 100.0), ("P2", "R", "J", 500.0, 0.2, 100.0)],
               roughness_height=[1e-4, np.nan])
    with pytest.raises(InputError, match="P2") as info:
        NetworkSolver(net, headloss="darcy-weisbach")
    assert "P1" not in str(info.value)


def test_unknown_headloss_model_lists_the_legal_ones(make):
    net = make([("J", 0.0, 0.01)], [("R", 50.0)], [("P", "R", "J", 500.0, 0.2, 100.0)])
    with pytest.raises(InputError, match="hazen-williams or darcy-weisbach"):
        NetworkSolver(net, headloss="manning")


def test_pump_off_or_against_too_high_a_lift_passes_nothing(make):
    pipes = [("P", "J", "HIGH", 500.0, 0.2, 110.0)]
    off = make([("J", 0.0, 0.0)], [("LOW", 10.0), ("HIGH", 30.0)], pipes,
               pumps=[("PU", "LOW", "J", 40.0, 2000.0, 2.0, 0.0)])
    res = NetworkSolver(off).solve()
    assert res.pump_flow[0] == 0.0 and res.flow[0] == 0.0 and "PU" in res.closed_links
    # shutoff 15 m < lift 20 m: the pump cannot deliver; it stops and the junction sits at 30 m
    weak = make([("J", 0.0, 0.0)], [("LOW", 10.0), ("HIGH", 30.0)], pipes,
                pumps=[("PU", "LOW", "J", 15.0, 2000.0, 2.0, 1.0)])
    res = NetworkSolver(weak).solve()
    assert res.pump_flow[0] == 0.0 and res.head[0] == pytest.approx(30.0, abs=1e-9)


def test_roughness_override_is_validated(make):
    net = make([("J", 0.0, 0.01)], [("R", 50.0)], [("P", "R", "J", 500.0, 0.2, 100.0)])
    with pytest.raises(InputError, match="shape"):
        NetworkSolver(net).solve(roughness=[100.0, 90.0])
    with pytest.raises(InputError, match="'P'|P"):
        NetworkSolver(net).solve(roughness=[-5.0])


def test_check_valve_against_the_only_supply_is_named(make):
    # a dead end fed only through a check valve that points toward the source cannot be supplied
    net = make([("J1", 0.0, 0.01), ("J2", 0.0, 0.005)], [("R", 50.0)],
               [("P1", "R", "J1", 100.0, 0.2, 100.0), ("CV", "J2", "J1", 100.0, 0.2, 100.0)],
               status=[PipeStatus.OPEN, PipeStatus.CHECK_VALVE])
    with pytest.raises(NetworkError) as info:
        NetworkSolver(net).solve()
    assert "CV" in str(info.value) and "J2" in str(info.value)


@pytest.mark.parametrize("seed", range(12))
def test_random_networks_with_valves_satisfy_the_valve_conditions(make_random, seed):
    # complementarity of a check valve (closed form): forward flow >= 0, and a closed valve has
    # no forward head across it; mass balance within 1e-6 of total demand at every junction
    rng = np.random.default_rng(seed)
    net = make_random(int(rng.integers(10, 80)), 100 + seed, n_sources=int(rng.integers(1, 3)))
    status = net.status.copy()
    loop = np.arange(net.n_pipes) >= net.n_junctions - 1  # pipes beyond the spanning tree
    loop[-net.n_sources:] = False
    draw = rng.random(net.n_pipes)
    status[loop & (draw < 0.1)] = PipeStatus.CLOSED
    status[loop & (draw >= 0.1) & (draw < 0.5)] = PipeStatus.CHECK_VALVE
    net = net.replace(status=status)
    res = NetworkSolver(net).solve(Snapshot(demand_factor=float(rng.uniform(0.5, 2.0))))
    cv = status == PipeStatus.CHECK_VALVE
    assert np.all(res.flow[cv] >= -1e-9)
    shut = cv & (res.flow == 0)
    drop = res.head[net.pipe_from] - res.head[net.pipe_to]
    assert np.all(drop[shut] <= 1e-5)
    assert np.all(res.flow[status == PipeStatus.CLOSED] == 0)
    demand = res.snapshot.demand_factor * net.demand
    inflow = (np.bincount(net.pipe_to, res.flow, net.n_nodes)
              - np.bincount(net.pipe_from, res.flow, net.n_nodes))[: net.n_junctions]
    assert np.abs(inflow - demand).max() <= 1e-6 * demand.sum()


def test_unusable_geometry_is_refused_before_iterating(make):
    net = make([("J", 0.0, 0.01)], [("R", 50.0)],
               [("P1", "R", "J", 0.0, 0.2, 100.0), ("P2", "R", "J", 100.0, np.nan, 100.0),
                ("P3", "R", "J", 100.0, 0.2, 100.0)])
    with pytest.raises(InputError) as info:
        NetworkSolver(net)
    text = str(info.value)
    assert "2 problems" in text and "P1" in text and "P2" in text and "P3" not in text


def test_a_frozen_status_that_contradicts_the_solution_is_an_error(make):
    # guard against cycling: with no flips allowed the valve stays open against the flow; the
    # solver must say so instead of returning reverse flow through a check valve
    pipes = [("CV", "B", "A", 800.0, 0.25, 110.0)]
    net = make([], [("A", 70.0), ("B", 52.0)], pipes, status=[PipeStatus.CHECK_VALVE])
    with pytest.raises(ConvergenceError, match="CV") as info:
        NetworkSolver(net, max_status_changes=0).solve()
    assert info.value.worst_links == ["CV"]


def test_sensitivities_with_a_pump_and_a_closed_check_valve(make):
    # central differences (common practice) through a running pump and a shut check valve
    junctions = [("J1", 0.0, 0.01), ("J2", 5.0, 0.02), ("J3", 2.0, 0.015)]
    pipes = [("P1", "J1", "J2", 400.0, 0.2, 110.0), ("P2", "J2", "J3", 300.0, 0.15, 100.0),
             ("P3", "J1", "J3", 500.0, 0.15, 90.0), ("P4", "HIGH", "J3", 200.0, 0.2, 120.0),
             ("CV", "HIGH", "J2", 300.0, 0.15, 100.0)]
    status = [PipeStatus.OPEN] * 4 + [PipeStatus.CHECK_VALVE]
    net = make(junctions, [("LOW", 10.0), ("HIGH", 45.0)], pipes, status=status,
               pumps=[("PU", "LOW", "J1", 50.0, 3000.0, 2.0, 1.0)])
    solver = NetworkSolver(net)
    res = solver.solve()
    assert "CV" in res.closed_links and res.pump_flow[0] > 0  # the case under test
    b2 = -net.demand[:, None]
    dH, dQ = solver.sensitivities(res, np.zeros((net.n_pipes + 1, 1)), b2)
    fd_h, fd_q = _fd(solver, lambda x: Snapshot(demand_factor=x), lambda x: None, 1.0, 1e-4)
    np.testing.assert_allclose(dH[:, 0], fd_h, rtol=1e-5, atol=1e-8)
    np.testing.assert_allclose(dQ[:, 0], fd_q, rtol=1e-5, atol=1e-10)


def test_kept_connectivity_answers_match_fresh_ones_over_alternating_closures():
    # the solver keeps the last few "cut off from every source" answers by set of open links
    # (calib.hydraulics.memo); alternate over more sets than it keeps, and change what it returns:
    # every answer must still be the graph search's own (scipy's connected components)
    from .conftest import random_looped
    net = random_looped(40, seed=3, extra_loops=2)
    solver = NetworkSolver(net)
    rng = np.random.default_rng(0)
    masks = [rng.random(solver.np_) > 0.15 for _ in range(11)]
    for use in (masks[:5], masks[:5], masks, masks):  # a few sets (kept), then more (dropped)
        for mask in use:
            got = solver._reachable(mask)
            np.testing.assert_array_equal(got, solver._components(mask))
            got[:] = ~got  # a caller's change must not reach the kept answer
    assert any(solver._components(m).any() for m in masks)  # some closures do cut junctions off


def test_tiny_networks_factor_at_every_iteration_larger_ones_reuse_the_factor():
    # a speed rule with no effect on the answer beyond the mass tolerance (common practice: a
    # direct solve where it is cheap, an older factor as CG preconditioner where it is not)
    from calib.hydraulics import assembly, factor
    from .conftest import random_looped
    if not factor.cholmod_available() or factor.choose() != "cholmod":
        pytest.skip("the rule reads CHOLMOD's factorization work")
    small, large = random_looped(60, seed=1), random_looped(2000, seed=1)
    for net, tiny in ((small, True), (large, False)):
        solver = NetworkSolver(net)
        cold = solver.solve()
        warm = solver.solve(roughness=np.asarray(net.roughness, float) * 1.03, warm_start=cold)
        work = solver.pattern._factorizer.factor_work
        assert (work < assembly.REUSE_MIN_WORK) == tiny
        if tiny:
            assert cold.factorizations == cold.iterations and warm.factorizations == warm.iterations
        else:
            assert warm.factorizations < warm.iterations
        again = NetworkSolver(net, reuse_factor=False).solve(
            roughness=np.asarray(net.roughness, float) * 1.03)
        np.testing.assert_allclose(warm.head, again.head, atol=1e-6)


def test_roughness_changed_in_place_between_solves_is_seen():
    # the solver keeps the last roughness's law coefficients (a fit solves many snapshots at one
    # C); a caller that changes its array in place must still get the new C's answer
    from .conftest import random_looped
    net = random_looped(30, seed=4)
    solver = NetworkSolver(net)
    c = np.asarray(net.roughness, float).copy()
    original = c.copy()
    first = solver.solve(roughness=c)
    c *= 0.8  # same array object, new values
    second = solver.solve(roughness=c, warm_start=first)
    fresh = NetworkSolver(net).solve(roughness=c.copy())
    np.testing.assert_allclose(second.head, fresh.head, atol=1e-6)
    assert not np.allclose(first.head, second.head, atol=1e-3)
    np.testing.assert_array_equal(first.roughness, original)  # the result kept its own C
