"""The factorization backends (calib.hydraulics.factor): each against scipy's dense solvers, and the
solver's answers the same with each. CHOLMOD checks skip where scikit-sparse is not installed; the
SuperLU fallback is always checked."""

import numpy as np
import pytest
import scipy.linalg
import scipy.sparse as sp

from calib.errors import InputError
from calib.hydraulics import NetworkSolver
from calib.hydraulics import factor
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
