"""Factorizations kept beside solutions (``NetworkSolver._kept``): a warm start from a solution
starts from that solution's factor, the sensitivities at a solution factor S once and keep it, and a
kept factor is never changed by a later solve. References: solves and sensitivities with a new
factorization at every iteration (``reuse_factor=False``), and a product with S itself."""

import numpy as np
import pytest

from calib.hydraulics import NetworkSolver, Snapshot
from calib.hydraulics import assembly, factor, solver as solver_module
from calib.hydraulics import headloss as hl

from .conftest import random_looped

cholmod = pytest.mark.skipif(not factor.cholmod_available(),
                             reason="scikit-sparse (CHOLMOD) not installed")
BACKENDS = ["superlu", pytest.param("cholmod", marks=cholmod)]


@pytest.fixture(scope="module")
def net():
    return random_looped(2000, seed=5, n_sources=2)


def _loadings(net):
    """Two loadings a fit alternates between: a hydrant flowing at one end, then at the other."""
    ids = net.node_ids
    return (Snapshot(extra_demand={str(ids[1500]): 0.06}, label="A"),
            Snapshot(extra_demand={str(ids[700]): 0.06}, label="B"))


def _sensitivity_rhs(solver, result):
    """dF/dC of the pipes' head losses for three groups of pipes (as the calibration's Jacobian)."""
    d = solver.dheadloss_droughness(result)
    group = np.arange(solver.np_) % 3
    n_links = len(solver.link_from)
    dF1 = np.zeros((n_links, 3))
    dF1[np.arange(solver.np_), group] = d
    return dF1, np.zeros((solver.nj, 3))


@pytest.mark.parametrize("backend", BACKENDS)
def test_warm_start_from_a_solution_uses_its_own_factor(net, backend, monkeypatch):
    # a fit's pattern: every snapshot solved, its sensitivities taken, then each solved again warm
    # from its own solution at slightly changed C. With the factor of its own solution (kept by the
    # sensitivities) the next solve needs no factorization (CG absorbs a 2 % change of every
    # weight); with only the last factor kept (the other loading's, as before) it needs some.
    monkeypatch.setenv(factor.ENV, backend)
    a, b = _loadings(net)
    c = np.asarray(net.roughness, float)
    counts, heads = {}, {}
    default = solver_module.KEPT_FACTOR_BYTES
    for budget in (default, 0.0):  # 0: one factor kept (the last)
        monkeypatch.setattr(solver_module, "KEPT_FACTOR_BYTES", budget)
        s = NetworkSolver(net)
        ra, rb = s.solve(a, roughness=c), s.solve(b, roughness=c)
        for r in (ra, rb):
            s.sensitivities(r, *_sensitivity_rhs(s, r))
        ra1 = s.solve(a, roughness=c * 1.01, warm_start=ra)
        counts[budget] = ra1.factorizations
        heads[budget] = ra1.head
    assert counts[default] == 0
    assert counts[0.0] >= 1
    exact = NetworkSolver(net, reuse_factor=False).solve(a, roughness=c * 1.01)
    for h in heads.values():
        np.testing.assert_allclose(h, exact.head, atol=1e-6)  # the solver's head tolerance


@pytest.mark.parametrize("backend", BACKENDS)
def test_sensitivities_with_kept_factors_match_a_fresh_factorization(net, backend, monkeypatch):
    monkeypatch.setenv(factor.ENV, backend)
    a, b = _loadings(net)
    s = NetworkSolver(net)
    ra = s.solve(a)
    rb = s.solve(b, warm_start=ra)
    ref = NetworkSolver(net, reuse_factor=False)  # nothing kept: a scratch factorization
    for r in (ra, rb, ra):  # the second call at ra finds the factor the first one kept
        before = s.pattern.factorizations
        dH, dQ = s.sensitivities(r, *_sensitivity_rhs(s, r))
        made = s.pattern.factorizations - before
        dH0, dQ0 = ref.sensitivities(r, *_sensitivity_rhs(ref, r))
        np.testing.assert_allclose(dH, dH0, rtol=1e-9, atol=1e-12 * np.abs(dH0).max())
        np.testing.assert_allclose(dQ, dQ0, rtol=1e-9, atol=1e-12 * np.abs(dQ0).max())
    assert made == 0  # the last call: S at ra was factored and kept by the first


@cholmod
def test_a_kept_factor_is_not_changed_by_later_solves(net, monkeypatch):
    # later solves warm-started from the same solution update (low-rank) and refactor the factor
    # they start from; the one kept beside the solution must still factor its own S exactly
    monkeypatch.setenv(factor.ENV, "cholmod")
    monkeypatch.setattr(assembly, "UPDATE_MIN_WORK", 0.0)  # updates on a network this small too
    a, b = _loadings(net)
    s = NetworkSolver(net, update_budget=1.0)  # updates rather than new factorizations
    c = np.asarray(net.roughness, float)
    r0 = s.solve(a, roughness=c)
    kept = s.kept_factor(r0)
    assert kept is not None
    S = s.pattern.hold(s.pattern.assemble(kept.w, kept.extra), kept.fixed)
    x = np.random.default_rng(3).standard_normal(s.nj)
    x[kept.fixed] = 0.0
    rhs = S[s.pattern.inv][:, s.pattern.inv] @ x  # S in junction order
    copies = []
    own = solver_module._KeptFactor.own
    monkeypatch.setattr(solver_module._KeptFactor, "own",
                        lambda self: copies.append(self.shared) or own(self))
    for snap, scale in ((b, 1.0), (a, 1.3), (b, 0.8)):
        s.solve(snap, roughness=c * scale, warm_start=r0)
    assert any(copies)  # some solve did update the factor it started from (a copy of it)
    np.testing.assert_allclose(kept.factor(rhs), x, rtol=1e-8, atol=1e-10)


def test_kept_factors_stay_within_their_memory_budget(net, monkeypatch):
    s = NetworkSolver(net)
    s.solve()
    nnz = s.pattern._factorizer.factor_nnz
    monkeypatch.setattr(solver_module, "KEPT_FACTOR_BYTES", 2.5 * (12.0 * nnz + 8.0 * s.nj))
    assert s._capacity() == 2
    c = np.asarray(net.roughness, float)
    last = None
    for i in range(5):
        last = s.solve(_loadings(net)[i % 2], roughness=c * (1 + 0.01 * i), warm_start=last)
        assert len({id(e) for e in s._kept.values()}) <= 2 and len(s._kept) <= 8
    assert s.kept_factor(last) is not None  # the newest is kept


@pytest.mark.parametrize("backend", BACKENDS)
def test_cg_steps_stop_at_the_mass_tolerance_without_costing_newton_iterations(net, backend,
                                                                               monkeypatch):
    # reference: the same warm solves with a new factorization at every iteration (reuse off,
    # every step exact), warm-started as a fit makes them (each loading from its own last
    # solution, C moved by a few % in one group at a time). CG stops at CG_MASS_FRACTION of the
    # mass tolerance: no solve takes more Newton iterations for it, and the answers agree within
    # the solver's tolerances
    monkeypatch.setenv(factor.ENV, backend)
    c0 = np.asarray(net.roughness, dtype=float)
    group = np.random.default_rng(8).integers(0, 3, c0.size)
    reuse, exact = NetworkSolver(net), NetworkSolver(net, reuse_factor=False)
    last, last_exact, cg_used = {}, {}, 0
    for step in range(4):
        c = c0 * np.where(group == step % 3, 1.0 + 0.03 * (step + 1), 1.0)
        for snap in _loadings(net):
            got = reuse.solve(snap, roughness=c, warm_start=last.get(snap.label))
            ref = exact.solve(snap, roughness=c, warm_start=last_exact.get(snap.label))
            last[snap.label], last_exact[snap.label] = got, ref
            cg_used += got.iterations - got.factorizations
            assert got.iterations <= ref.iterations
            np.testing.assert_allclose(got.head, ref.head, atol=1e-6)  # the head tolerance
            assert got.max_mass_error <= 1e-8 * (np.abs(net.demand).sum() + 0.06)
    assert cg_used > 0  # the CG path ran


def test_dheadloss_droughness_is_that_of_each_results_own_c(net):
    # closed form: dh/dC = -1.852 h / C with h = 10.67 L Q^1.852 / (C^1.852 D^4.8704) of the
    # result's own flows and C (headloss.hazen_williams_headloss, independent of the solver's
    # kept resistances), also for a result solved before the solver moved on to another C
    solver = NetworkSolver(net)
    c1 = np.asarray(net.roughness, dtype=float) * 1.02
    c2 = c1 * 0.9
    r1 = solver.solve(roughness=c1)
    d1 = solver.dheadloss_droughness(r1)  # the solver's last C: its kept resistances are used
    r2 = solver.solve(roughness=c2, warm_start=r1)
    for res, c in ((r1, c1), (r2, c2), (r1, c1)):  # r1 again: no longer the last C
        ref = -1.852 * hl.hazen_williams_headloss(res.flow, net.length, net.diameter, c) / c
        np.testing.assert_allclose(solver.dheadloss_droughness(res), ref, rtol=1e-12,
                                   atol=1e-12 * np.abs(ref).max())
    np.testing.assert_array_equal(solver.dheadloss_droughness(r1), d1)
