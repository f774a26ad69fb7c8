"""The factorization backends (calib.hydraulics.factor): each against scipy's dense solvers, and the
solver's answers the same with each. CHOLMOD checks skip where scikit-sparse is not installed; the
SuperLU fallback is always checked."""

import numpy as np
import pytest
import scipy.linalg
import scipy.sparse as sp

from calib.errors import InputError
from calib.hydraulics import NetworkSolver
from calib.hydraulics import assembly, factor
from calib.hydraulics.assembly import SchurPattern

from .conftest import random_looped

cholmod = pytest.mark.skipif(not factor.cholmod_available(),
                             reason="scikit-sparse (CHOLMOD) not installed")
BACKENDS = ["superlu", pytest.param("cholmod", marks=cholmod)]


def _schur(net, backend, seed=0):
    """S = A21 diag(w) A12 of ``net`` with random positive w, in the pattern's order."""
    solver = NetworkSolver(net)
    pat = SchurPattern(solver.nj, solver.link_from, solver.link_to, net.n_nodes, backend=backend)
    w = np.random.default_rng(seed).uniform(1e-3, 10.0, len(solver.link_from))
    return pat, pat.assemble(w)


@pytest.mark.parametrize("backend", BACKENDS)
def test_factor_solves_like_dense_cholesky(backend):
    # reference: scipy.linalg.cho_factor / cho_solve on the same matrix (LAPACK potrf)
    net = random_looped(80, seed=3, n_sources=2)
    pat, S = _schur(net, backend)
    assert pat.backend == backend
    b = np.random.default_rng(1).standard_normal((pat.n, 3))
    ref = scipy.linalg.cho_solve(scipy.linalg.cho_factor(S.toarray()), b)
    got = pat.factorize(S).solve_permuted(b)
    np.testing.assert_allclose(got, ref, rtol=1e-9, atol=1e-12 * np.abs(ref).max())
    # one column, in junction order through the permutation
    x = pat.factorize(S)(b[:, 0][pat.inv])
    np.testing.assert_allclose(x[pat.perm], ref[:, 0], rtol=1e-9, atol=1e-12 * np.abs(ref).max())
    assert pat.work_ratio is not None and pat.work_ratio > 0


@pytest.mark.parametrize("backend", BACKENDS)
def test_ordering_is_a_permutation_that_reduces_fill(backend):
    net = random_looped(300, seed=4)
    pat, S = _schur(net, backend)
    assert sorted(pat.perm.tolist()) == list(range(pat.n))
    # fill of the factor in the chosen order against the natural order (dense Cholesky's nonzeros)
    S_old = S[pat.inv][:, pat.inv]
    chosen = np.count_nonzero(np.abs(np.linalg.cholesky(S.toarray())) > 0)
    natural = np.count_nonzero(np.abs(np.linalg.cholesky(S_old.toarray())) > 0)
    assert chosen < natural


@pytest.mark.parametrize("backend", BACKENDS)
def test_solver_same_answer_with_each_backend(backend, monkeypatch):
    # reference: the same Newton iteration with a dense Cholesky (scipy.linalg.cho_factor)
    monkeypatch.setenv(factor.ENV, backend)
    net = random_looped(120, seed=9, n_sources=2)
    solver = NetworkSolver(net)
    assert solver.pattern.backend == backend
    got = solver.solve()
    dense = NetworkSolver(net, dense=True).solve()
    np.testing.assert_allclose(got.head, dense.head, atol=1e-8)
    np.testing.assert_allclose(got.flow, dense.flow, atol=1e-9)


@cholmod
def test_cholmod_says_singular_for_a_matrix_that_is_not_positive_definite():
    # S is positive definite in exact arithmetic; a pivot <= 0 (an indefinite matrix here, rounding
    # with an absurd pipe in a network) is reported as SuperLU reports an exact zero pivot
    A = sp.csc_matrix(np.array([[2.0, 3.0, 0.0], [3.0, 2.0, 1.0], [0.0, 1.0, 4.0]]))
    with pytest.raises(RuntimeError, match="singular"):
        factor.factorizer("cholmod", A).factor(A)
    B = sp.csc_matrix(np.array([[4.0, 1.0, 0.0], [1.0, 3.0, 1.0], [0.0, 1.0, 2.0]]))
    b = np.array([1.0, 2.0, 3.0])
    np.testing.assert_allclose(factor.factorizer("cholmod", B).factor(B)(b),
                               np.linalg.solve(B.toarray(), b), rtol=1e-12)


def test_backend_choice_errors_name_the_setting(monkeypatch):
    with pytest.raises(InputError, match="CALIB_FACTOR"):
        factor.choose("umfpack")
    monkeypatch.setattr(factor, "cholmod_available", lambda: False)
    assert factor.choose("auto") == "superlu"
    with pytest.raises(InputError, match="scikit-sparse"):
        factor.choose("cholmod")
    monkeypatch.setenv(factor.ENV, "superlu")
    assert factor.choose() == "superlu"


@cholmod
def test_low_rank_update_gives_the_factor_of_the_changed_matrix(monkeypatch):
    # reference: scipy.linalg.cho_solve on the changed matrix, factored from scratch (LAPACK potrf);
    # links whose weight rose are updates, those whose weight fell downdates, one junction's
    # extra diagonal term changes, and a fixed junction's row stays out of the change
    net = random_looped(80, seed=5, n_sources=2)
    pat, S = _schur(net, "cholmod")
    rng = np.random.default_rng(7)
    w = np.random.default_rng(0).uniform(1e-3, 10.0, len(pat.link_from))  # as in _schur
    links = rng.choice(len(w), 12, replace=False)
    w2 = w.copy()
    w2[links[:6]] *= 5.0
    w2[links[6:]] *= 0.1
    extra, extra2 = np.zeros(pat.n), np.zeros(pat.n)
    extra2[3] = 2.5
    fixed = np.zeros(pat.n, dtype=bool)
    F = pat.factorize(S)
    assert F.can_update
    up, down = pat.low_rank(links, w2[links] - w[links], np.array([3]), extra2[[3]] - extra[[3]],
                            fixed)
    assert F.update(up, down)
    S2 = pat.assemble(w2, extra2)
    b = np.random.default_rng(1).standard_normal(pat.n)
    ref = scipy.linalg.cho_solve(scipy.linalg.cho_factor(S2.toarray()), b)
    np.testing.assert_allclose(F.solve_permuted(b), ref, rtol=1e-8,
                               atol=1e-10 * np.abs(ref).max())
    # the work estimate grows with the links updated and is below a factorization for a few; on
    # a network this small no update is worth its Python work (infinite cost) unless allowed
    assert pat.update_work(links, np.array([3])) == np.inf
    monkeypatch.setattr(assembly, "UPDATE_MIN_WORK", 0.0)
    assert 0 < pat.update_work(links[:1], np.array([], int)) < pat.update_work(links, np.array([3]))
    assert pat.update_work(links, np.array([3])) < 1.0


def test_etree_and_path_sums_of_a_small_factor():
    # closed form: the factor of a tridiagonal matrix is bidiagonal, its elimination tree a chain
    # 0 -> 1 -> ... -> n-1, so the path sum from column j is the sum of the values j..n-1
    n = 6
    L = sp.csc_matrix(np.eye(n) + np.diag(np.ones(n - 1), -1))
    parent = factor._etree(L)
    assert parent.tolist() == [1, 2, 3, 4, 5, -1]
    value = np.arange(1.0, n + 1)
    np.testing.assert_allclose(factor._path_sums(parent, value), np.cumsum(value[::-1])[::-1])
    # a star: every column's parent is the last one
    star = sp.csc_matrix(np.eye(n) + np.vstack([np.zeros((n - 1, n)), np.r_[np.ones(n - 1), 0]]))
    assert factor._etree(star).tolist() == [5, 5, 5, 5, 5, -1]
    np.testing.assert_allclose(factor._path_sums(factor._etree(star), value),
                               np.r_[value[:-1] + value[-1], value[-1]])


@pytest.mark.parametrize("backend", BACKENDS)
def test_factor_reuse_with_updates_matches_a_factorization_every_iteration(backend, monkeypatch):
    # reference: the same Newton iteration with a new factorization at every step (reuse off);
    # with reuse the steps are solved by CG (after low-rank updates with CHOLMOD) to the mass
    # tolerance, so the answers agree within the solver's tolerances
    monkeypatch.setenv(factor.ENV, backend)
    monkeypatch.setattr(assembly, "UPDATE_MIN_WORK", 0.0)  # updates on a network this small too
    net = random_looped(1500, seed=11, n_sources=2)
    reuse = NetworkSolver(net)
    got = reuse.solve()
    exact = NetworkSolver(net, reuse_factor=False).solve()
    assert got.factorizations < exact.factorizations
    if backend == "cholmod":
        assert reuse.updates >= 1
    np.testing.assert_allclose(got.head, exact.head, atol=1e-6)
    q_ref = np.abs(net.demand).sum()
    np.testing.assert_allclose(got.flow, exact.flow, atol=1e-8 * q_ref * 10)
    assert got.max_mass_error <= max(1e-8 * q_ref, 1e-9)


def test_optimized_blas_is_found_among_loaded_libraries_outside_python_packages():
    # paths as /proc/self/maps lists them on Debian with and without OpenBLAS (seen on this
    # machine): numpy's bundled OpenBLAS is not CHOLMOD's and must not count
    numpy_copy = "/usr/lib/python3/site-packages/numpy.libs/libscipy_openblas64_-32a4b2a6.so"
    reference = ["/usr/lib/x86_64-linux-gnu/blas/libblas.so.3.11.0",
                 "/usr/lib/x86_64-linux-gnu/lapack/liblapack.so.3.11.0", numpy_copy]
    assert factor.optimized_in(reference) is None
    serial = "/usr/lib/x86_64-linux-gnu/openblas-serial/libblas.so.3"
    assert factor.optimized_in(reference[2:] + [serial]) == serial
    assert factor.optimized_in(["/opt/intel/lib/libmkl_rt.so.2"]) == "/opt/intel/lib/libmkl_rt.so.2"


def test_cholmod_mode_choice_names_the_setting(monkeypatch):
    with pytest.raises(InputError, match="CALIB_CHOLMOD_MODE"):
        factor.supernodal_from("multifrontal")
    assert factor.supernodal_from("simplicial") == np.inf
    assert factor.supernodal_from("supernodal") == 0.0
    # a fixed work threshold whichever BLAS is loaded (results must not depend on the machine's
    # timings): the same with the reference BLAS and with an optimized one
    monkeypatch.setattr(factor, "optimized_blas", lambda: None)
    assert factor.supernodal_from("auto") == factor.SUPERNODAL_MIN_WORK
    monkeypatch.setattr(factor, "optimized_blas", lambda: "/usr/lib/openblas/libblas.so.3")
    assert factor.supernodal_from() == factor.SUPERNODAL_MIN_WORK
    assert 0.0 < factor.SUPERNODAL_MIN_WORK < np.inf
    monkeypatch.setenv(factor.MODE_ENV, "simplicial")
    assert factor.supernodal_from() == np.inf


@cholmod
def test_supernodal_factors_solve_and_update_like_dense_cholesky(monkeypatch):
    # reference: scipy.linalg.cho_solve (LAPACK potrf) on the same matrices. The first
    # factorization is simplicial (it gives the column counts), the next ones supernodal L L^T;
    # an update turns one into simplicial L D L^T, and a refactorization in place of a simplicial
    # one is refused (a new supernodal factor is made instead)
    monkeypatch.setenv(factor.MODE_ENV, "supernodal")
    net = random_looped(120, seed=13, n_sources=2)
    pat, S = _schur(net, "cholmod")
    b = np.random.default_rng(2).standard_normal(pat.n)
    ref = scipy.linalg.cho_solve(scipy.linalg.cho_factor(S.toarray()), b)
    first = pat.factorize(S)
    assert not first.solve_permuted.supernodal and pat._factorizer.supernodal
    second = pat.factorize(S)
    assert second.solve_permuted.supernodal
    for F in (first, second):
        np.testing.assert_allclose(F.solve_permuted(b), ref, rtol=1e-9,
                                   atol=1e-12 * np.abs(ref).max())
    assert not first.refactor(S)  # simplicial: the caller factors anew
    assert second.refactor(S)
    w = np.random.default_rng(0).uniform(1e-3, 10.0, len(pat.link_from))  # as in _schur
    w2 = w.copy()
    w2[[4, 9]] *= [5.0, 0.2]
    links = np.array([4, 9])
    up, down = pat.low_rank(links, w2[links] - w[links], np.array([], int), np.zeros(0),
                            np.zeros(pat.n, dtype=bool))
    assert second.update(up, down) and not second.solve_permuted.supernodal
    S2 = pat.assemble(w2)
    ref2 = scipy.linalg.cho_solve(scipy.linalg.cho_factor(S2.toarray()), b)
    np.testing.assert_allclose(second.solve_permuted(b), ref2, rtol=1e-8,
                               atol=1e-10 * np.abs(ref2).max())
    # a matrix that is not positive definite: the supernodal L L^T stops at the pivot itself
    bad = pat.assemble(-w)
    assert not pat.factorize(S).refactor(bad)


@cholmod
@pytest.mark.parametrize("min_work", [0.0, 1e30])
def test_a_first_supernodal_factorization_gives_the_simplicial_column_counts(monkeypatch,
                                                                             min_work):
    # reference: the column counts of the dense Cholesky factor of the same matrix
    # (numpy.linalg.cholesky, LAPACK potrf: structural zeros stay exact zeros with random
    # weights) and scipy.linalg.cho_solve. A network from SUPERNODAL_FIRST_JUNCTIONS junctions
    # is factored supernodally at once, turned into L D L^T for its counts; the next
    # factorizations are supernodal only where the work reaches SUPERNODAL_MIN_WORK
    monkeypatch.setattr(factor, "SUPERNODAL_FIRST_JUNCTIONS", 0)
    monkeypatch.setattr(factor, "SUPERNODAL_MIN_WORK", min_work)
    net = random_looped(150, seed=17, n_sources=2)
    pat, S = _schur(net, "cholmod")
    dense_counts = (np.linalg.cholesky(S.toarray()) != 0).sum(axis=0)
    b = np.random.default_rng(3).standard_normal(pat.n)
    ref = scipy.linalg.cho_solve(scipy.linalg.cho_factor(S.toarray()), b)
    fz = pat._factorizer
    assert fz._first_supernodal
    first = pat.factorize(S)
    assert not first.solve_permuted.supernodal  # now L D L^T: it can take low-rank updates
    assert fz.factor_work == float((dense_counts.astype(float) ** 2).sum())
    assert fz.factor_nnz == int(dense_counts.sum())
    second = pat.factorize(S)
    assert second.solve_permuted.supernodal == (min_work == 0.0) == fz.supernodal
    for F in (first, second):
        np.testing.assert_allclose(F.solve_permuted(b), ref, rtol=1e-9,
                                   atol=1e-12 * np.abs(ref).max())


@cholmod
def test_solver_with_supernodal_factors_gives_the_dense_answer(monkeypatch):
    # reference: the same Newton iteration with a dense Cholesky (scipy.linalg.cho_factor); the
    # reuse path (CG, low-rank updates of a supernodal factor) runs too
    monkeypatch.setenv(factor.ENV, "cholmod")
    monkeypatch.setenv(factor.MODE_ENV, "supernodal")
    monkeypatch.setattr(assembly, "UPDATE_MIN_WORK", 0.0)
    net = random_looped(1500, seed=11, n_sources=2)
    solver = NetworkSolver(net)
    got = solver.solve()
    assert solver.pattern._factorizer.supernodal and solver.updates >= 1
    dense = NetworkSolver(net, dense=True).solve()
    np.testing.assert_allclose(got.head, dense.head, atol=1e-6)
    q_ref = np.abs(net.demand).sum()
    np.testing.assert_allclose(got.flow, dense.flow, atol=1e-8 * q_ref * 10)


def test_across_junctions_is_the_head_change_difference_along_each_link():
    # closed form: dh[from] - dh[to] per link, with dh = 0 at the sources (gathers from a padded
    # array, as the sensitivities computed it before), for p columns and for one vector
    net = random_looped(200, seed=6, n_sources=3)
    solver = NetworkSolver(net)
    pat = solver.pattern
    dh = np.random.default_rng(4).standard_normal((pat.n, 4))
    padded = np.vstack([dh, np.zeros((net.n_nodes - pat.n, 4))])
    ref = padded[solver.link_from] - padded[solver.link_to]
    assert (solver.link_from >= pat.n).any() or (solver.link_to >= pat.n).any()  # source links
    np.testing.assert_array_equal(pat.across_junctions(dh), ref)
    np.testing.assert_array_equal(pat.across_junctions(dh[:, 1]), ref[:, 1])


@pytest.mark.parametrize("backend", BACKENDS)
def test_pcg_solves_like_dense_and_gives_up_at_a_breakdown(backend):
    # reference: numpy.linalg.solve on the changed matrix. CG preconditioned with the factor of
    # an older S converges where S changed little; where S is no longer positive definite (a link
    # weight of the wrong sign, as round-off can leave one of absurd size) its curvature p^T S p
    # is not positive: CG must give up (None, the caller factors anew), never divide by zero
    # (Hestenes and Stiefel 1952: the method needs a positive definite matrix)
    net = random_looped(80, seed=3, n_sources=2)
    solver = NetworkSolver(net)
    pat = SchurPattern(solver.nj, solver.link_from, solver.link_to, net.n_nodes, backend=backend)
    w = np.random.default_rng(0).uniform(1e-3, 10.0, len(solver.link_from))
    old = pat.factorize(pat.assemble(w))
    w2 = w.copy()
    w2[:3] *= 1.5
    S2 = pat.assemble(w2)
    b = np.random.default_rng(2).standard_normal(pat.n)
    x = pat.pcg(S2, old, b, tol=1e-12, max_iterations=50)
    ref = np.linalg.solve(S2.toarray(), b[pat.perm])
    np.testing.assert_allclose(x[pat.perm], ref, rtol=1e-8, atol=1e-10)
    assert pat.pcg(-S2, old, b, tol=1e-12, max_iterations=50) is None
    assert pat.pcg(0.0 * S2, old, b, tol=1e-12, max_iterations=50) is None
