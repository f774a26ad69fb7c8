"""Sparse linear algebra of the global gradient method: incidence products and the Schur complement.

The matrix solved at every iteration is ``S = A21 diag(w) A12`` over the junctions (w = 1/D per
link), symmetric positive definite while every junction is joined to a fixed-grade source by links
with w > 0. Its sparsity pattern depends only on which nodes the links join, so it is built once per
network: the CSC index arrays, the position in the CSC data array of each link's four contributions,
and a fill-reducing ordering. Assembly is then one ``np.bincount`` per iteration, and the
factorization (``factor``: CHOLMOD's Cholesky with its symbolic analysis kept, or SuperLU) works on
the pre-ordered matrix.

Not here: the head-loss laws (``headloss``) and the iteration itself (``solver``).
"""

from __future__ import annotations

import numpy as np
import scipy.linalg
import scipy.sparse as sp

from calib.hydraulics import factor as _factor

#: Time of a low-rank update per unit of its estimated work, over that of a factorization: measured
#: 0.85-1.7 on grids of 10k-200k pipes (CHOLMOD simplicial, 200 links updated at once).
UPDATE_TIME_PER_WORK = 1.5
#: Below this work of a factorization (sum of squared column counts of L; 3.7e6 on the 10k-pipe
#: grid, whose factorization takes about 3 ms) a new factorization costs less than the Python work
#: around a low-rank update, so none is made.
UPDATE_MIN_WORK = 1e6
#: Below this work of a factorization a new one costs less than the Python work of a CG attempt
#: with an older one, so the solver factors at every iteration. Measured (CPU, same process,
#: alternated): the demo town (work 1.4e4) 2.1-2.3 s against 2.7-3.0 s for its fit's 1,092
#: solves; a 1k-pipe grid (9.7e4) even; grids of 2k-10k pipes (3.2e5-3.7e6) gain from reuse.
REUSE_MIN_WORK = 5e4


class SchurPattern:
    """Fixed structure of ``A21 diag(w) A12`` for links ``link_from -> link_to`` over ``n_junctions``.

    Nodes numbered ``>= n_junctions`` are fixed-grade sources and do not appear in the matrix.
    ``dense=True`` factors with a dense Cholesky instead (for checks on small networks); ``backend``:
    ``"cholmod"``, ``"superlu"`` or None (``factor.choose``: ``$CALIB_FACTOR``, else CHOLMOD if there).
    """

    def __init__(self, n_junctions: int, link_from: np.ndarray, link_to: np.ndarray,
                 n_nodes: int, dense: bool = False, backend: str | None = None):
        self.n = int(n_junctions)
        self.n_nodes = int(n_nodes)
        self.link_from = np.asarray(link_from, dtype=np.int64)
        self.link_to = np.asarray(link_to, dtype=np.int64)
        self.dense = dense
        self.backend = "dense" if dense else _factor.choose(backend)
        f, t = self.link_from, self.link_to
        nj = self.n
        k = np.arange(len(f))
        jf, jt = f < nj, t < nj
        both = jf & jt
        # contributions: (row, col, link, sign); diagonal +w at each junction end, -w off-diagonal
        rows = np.concatenate([f[jf], t[jt], f[both], t[both], np.arange(nj)])
        cols = np.concatenate([f[jf], t[jt], t[both], f[both], np.arange(nj)])
        self._contrib_link = np.concatenate([k[jf], k[jt], k[both], k[both]])
        self._contrib_sign = np.concatenate([np.ones(jf.sum()), np.ones(jt.sum()),
                                             -np.ones(2 * both.sum())])
        n_contrib = len(self._contrib_link)
        self.perm = self._ordering(rows, cols)  # perm[new] = old
        inv = np.empty(nj, dtype=np.int64)
        inv[self.perm] = np.arange(nj)
        self.inv = inv  # inv[old] = new
        pr, pc = inv[rows], inv[cols]
        key = pc * nj + pr  # CSC order: by column, then row
        uniq, pos = np.unique(key, return_inverse=True)
        self.indices = (uniq % nj).astype(np.int32)
        col_of = uniq // nj
        self.indptr = np.searchsorted(col_of, np.arange(nj + 1)).astype(np.int32)
        self.nnz = len(uniq)
        self._col = col_of.astype(np.int64)  # column (new order) of each stored entry, for hold()
        self._contrib_pos = pos[:n_contrib]
        # data of S = this fixed (nnz x links) matrix times w: one sparse product per assembly
        self._gather = sp.csr_matrix((self._contrib_sign, (self._contrib_pos, self._contrib_link)),
                                     shape=(len(uniq), len(f)))
        # the diagonal contributions were listed by old junction number 0..nj-1
        self.diag_pos = pos[n_contrib:].astype(np.int64)  # diag_pos[old junction] -> data position
        self._a21 = None  # incidence A21 over the junctions (``inflow_matrix``)
        self._a12 = None  # its transpose with the signs of ``across`` (``across_junctions``)
        self._scratch = None  # factor refactored in place by ``factorize_scratch``
        self._blocks = None  # connected part of each junction (``blocks``)
        #: numeric factorizations made with this pattern (new or in place), for the benchmarks
        self.factorizations = 0
        self._factorizer = None if (dense or nj == 0) else _factor.factorizer(
            self.backend, sp.csc_matrix((np.ones(self.nnz), self.indices, self.indptr), shape=(nj, nj)))

    @property
    def work_ratio(self) -> float | None:
        """Flops of a factorization over those of one CG step; set by the first sparse factorization."""
        return None if self._factorizer is None else self._factorizer.work_ratio

    @property
    def reuse_pays(self) -> bool:
        """False where a factorization is cheaper than trying CG with an older one (tiny
        networks, ``REUSE_MIN_WORK``); True before the first factorization says."""
        work = getattr(self._factorizer, "factor_work", None)
        return work is None or work >= REUSE_MIN_WORK

    @property
    def blocks(self) -> np.ndarray:
        """Label of each junction's connected part of S (old order), found once: disjoint
        networks, e.g. the copies of a stacked network, are separate parts."""
        if self._blocks is None:
            from scipy.sparse.csgraph import connected_components
            graph = sp.csc_matrix((np.ones(self.nnz), self.indices, self.indptr),
                                  shape=(self.n, self.n))
            labels = connected_components(graph, directed=False)[1] if self.n else np.zeros(0)
            self._blocks = np.asarray(labels, dtype=np.int64)[self.inv]
        return self._blocks

    def update_work(self, links: np.ndarray, nodes: np.ndarray) -> float:
        """Work of low-rank updates for ``links`` and diagonal changes at junctions ``nodes`` (old
        order), over the work of one factorization; inf where the backend cannot update or the
        factorization is too cheap to be worth it (``UPDATE_MIN_WORK``)."""
        cost = getattr(self._factorizer, "update_cost", None)
        if cost is None or self._factorizer.factor_work < UPDATE_MIN_WORK:
            return np.inf
        f, t = self.link_from[links], self.link_to[links]
        # a link's update starts at the first of its junction ends in the factor's order
        first = np.minimum(np.where(f < self.n, self.inv[np.minimum(f, self.n - 1)], self.n),
                           np.where(t < self.n, self.inv[np.minimum(t, self.n - 1)], self.n))
        first = first[first < self.n]
        work = float(cost[first].sum() + cost[self.inv[nodes]].sum()) / self._factorizer.factor_work
        return UPDATE_TIME_PER_WORK * work

    def low_rank(self, links: np.ndarray, dw: np.ndarray, nodes: np.ndarray, dd: np.ndarray,
                 fixed: np.ndarray):
        """``(U, V)``, sparse columns in the factor's order with ``U U^T - V V^T`` = the change of S
        when link k's weight changes by ``dw[k]`` and junction i's extra diagonal by ``dd[i]``; the
        rows of ``fixed`` junctions are left out (``hold`` keeps them apart from the rest)."""
        nj = self.n
        f, t = self.link_from[links], self.link_to[links]
        k = np.arange(len(links))
        rows = np.concatenate([f, t, nodes])
        cols = np.concatenate([k, k, len(links) + np.arange(len(nodes))])
        mag = np.sqrt(np.abs(np.concatenate([dw, dd])))
        vals = np.concatenate([mag[:len(links)], -mag[:len(links)], mag[len(links):]])
        sign = np.concatenate([dw, dd]) > 0
        keep = rows < nj
        keep[keep] = ~fixed[rows[keep]]
        rows, cols, vals = rows[keep], cols[keep], vals[keep]
        out = []
        for want in (True, False):
            pick = sign[cols] == want
            used, c = np.unique(cols[pick], return_inverse=True)
            out.append(sp.csc_matrix((vals[pick], (self.inv[rows[pick]], c)),
                                     shape=(nj, len(used))) if len(used) else None)
        return tuple(out)

    def _ordering(self, rows, cols) -> np.ndarray:
        """Fill-reducing ordering of the pattern, computed once (``factor.ordering``)."""
        nj = self.n
        if nj == 0:
            return np.zeros(0, dtype=np.int64)
        if self.dense or nj < 3:
            return np.arange(nj)
        pattern = sp.csc_matrix((np.ones(len(rows)), (rows, cols)), shape=(nj, nj))
        return _factor.ordering(self.backend, pattern)

    # --- per iteration -----------------------------------------------------------------------
    def assemble(self, w: np.ndarray, extra_diag: np.ndarray | None = None,
                 out: sp.csc_matrix | None = None) -> sp.csc_matrix:
        """``S = A21 diag(w) A12`` in the permuted order, plus ``extra_diag`` (old order) on the
        diagonal. ``out``: a matrix this pattern assembled before, whose values are replaced (a
        solver's iterations reuse one: building a new scipy matrix costs more than the numbers)."""
        data = self._gather @ np.asarray(w, dtype=float)
        if extra_diag is not None and extra_diag.any():
            data[self.diag_pos] += extra_diag
        if out is not None:
            out.data = data
            return out
        return sp.csc_matrix((data, self.indices, self.indptr), shape=(self.n, self.n))

    def hold(self, matrix: sp.csc_matrix, fixed: np.ndarray) -> sp.csc_matrix:
        """Clear, in place, the off-diagonal entries of the rows and columns of ``fixed`` junctions
        (old order, bool): a junction held at a fixed grade (or cut off) then keeps dH = 0 for a zero
        right-hand side, as a source would, and the rest of S no longer sees its unknown."""
        if fixed.any():
            held = fixed[self.perm]  # by new index
            row, col = self.indices, self._col
            off = (held[row] | held[col]) & (row != col)
            matrix.data[off] = 0.0
        return matrix

    def factorize(self, matrix: sp.csc_matrix) -> "SchurFactor":
        """Factor S once (the backend's sparse factorization of the pre-ordered matrix, or dense Cholesky)."""
        self.factorizations += 1
        if self.dense:
            factor = scipy.linalg.cho_factor(matrix.toarray())
            return SchurFactor(self, matrix, lambda b: scipy.linalg.cho_solve(factor, b))
        return SchurFactor(self, matrix, self._factorizer.factor(matrix))

    def factorize_scratch(self, matrix: sp.csc_matrix) -> "SchurFactor":
        """Factor S into this pattern's scratch factor where the backend can (CHOLMOD: in the
        memory of the last one, no new factor allocated), else as ``factorize``. The result is
        good until the next call: for a factor used once and dropped (the sensitivities)."""
        scratch = self._scratch
        if scratch is not None and scratch.refactor(matrix):
            return scratch
        self._scratch = None
        self._scratch = factor = self.factorize(matrix)
        return factor

    def pcg(self, matrix: sp.csc_matrix, factor: "SchurFactor", b: np.ndarray, tol: float,
            max_iterations: int) -> np.ndarray | None:
        """Solve ``matrix x = b`` by conjugate gradients preconditioned with an older factor.

        Used when S changed little since ``factor`` was computed (a few links changed much, the
        rest little): each step costs one triangular solve instead of a factorization. Stops when
        the largest residual is <= ``tol`` (the residual of this system is the junction mass
        imbalance after the Newton step, in m3/s); returns None if that takes, or after three steps
        is on course to take, more than ``max_iterations`` steps, and where it breaks down (a
        curvature ``p^T S p`` or ``r^T z`` that is not positive: S or the old factor is no longer
        positive definite in floating point, e.g. a pipe of absurd diameter; the caller then
        factors S itself, which says so). Source: Hestenes and Stiefel (1952), J. Res. NBS 49(6), the
        preconditioned form as in Saad, Iterative Methods for Sparse Linear Systems (2003), alg. 9.1.
        """
        perm, inv = self.perm, self.inv
        r = np.asarray(b, dtype=float)[perm]
        x = np.zeros_like(r)
        r0 = np.abs(r).max(initial=0.0)
        if r0 <= tol:
            return x[inv]
        z = factor.solve_permuted(r)
        p = z.copy()
        rz = _dot(r, z)
        for k in range(1, max_iterations + 1):
            sp_ = matrix @ p
            curvature = _dot(p, sp_)
            if not (rz > 0.0 and curvature > 0.0):  # also NaN: a breakdown, not a step
                return None
            alpha = rz / curvature
            x += alpha * p
            r -= alpha * sp_
            rk = np.abs(r).max()
            if rk <= tol:
                return x[inv]
            if k >= 3:
                # give up early when the rate so far would need more than the allowed steps
                rate = (rk / r0) ** (1.0 / k)
                if rate >= 1.0 or k + np.log(tol / rk) / np.log(rate) > max_iterations:
                    return None
            z = factor.solve_permuted(r)
            rz_new = _dot(r, z)
            p = z + (rz_new / rz) * p
            rz = rz_new
        return None

    # --- incidence products -------------------------------------------------------------------
    def inflow(self, x: np.ndarray) -> np.ndarray:
        """``A21 x`` over all nodes: sum of x over links ending at a node minus those leaving it."""
        return (np.bincount(self.link_to, weights=x, minlength=self.n_nodes)
                - np.bincount(self.link_from, weights=x, minlength=self.n_nodes))

    def inflow_matrix(self, x: sp.spmatrix | np.ndarray):
        """``A21 X`` restricted to junctions for a matrix X (n_links x p), dense or sparse."""
        if self._a21 is None:  # built once per network
            m = len(self.link_from)
            self._a21 = sp.csr_matrix((np.concatenate([np.ones(m), -np.ones(m)]),
                                       (np.concatenate([self.link_to, self.link_from]),
                                        np.concatenate([np.arange(m), np.arange(m)]))),
                                      shape=(self.n_nodes, m))[: self.n]
        out = self._a21 @ x
        return out.toarray() if sp.issparse(out) else np.asarray(out)

    def across_junctions(self, dh: np.ndarray) -> np.ndarray:
        """``dh[from] - dh[to]`` per link for changes ``dh`` (n_junctions x p) at the junctions,
        none at the sources: ``-A21^T dh`` by one sparse product (built once), the same numbers
        as the gathers (each row sums at most two terms of +-1 times dh) in a third of the time
        (109 against 291 us for p = 5 columns on the 7,938-pipe grid)."""
        if self._a12 is None:
            m = len(self.link_from)
            f, t = self.link_from, self.link_to
            keep_f, keep_t = f < self.n, t < self.n
            self._a12 = sp.csr_matrix(
                (np.concatenate([np.ones(keep_f.sum()), -np.ones(keep_t.sum())]),
                 (np.concatenate([np.arange(m)[keep_f], np.arange(m)[keep_t]]),
                  np.concatenate([f[keep_f], t[keep_t]]))), shape=(m, self.n))
        return np.asarray(self._a12 @ dh)

    def across(self, head: np.ndarray) -> np.ndarray:
        """Head difference ``H[from] - H[to]`` per link, for heads over all nodes."""
        return head[self.link_from] - head[self.link_to]


def _dot(a: np.ndarray, b: np.ndarray) -> float:
    """Inner product of two vectors without BLAS: on a busy machine a threaded BLAS dot product of
    25k entries was measured at 16-20 ms (its threads wait for cores) against 0.02 ms for this."""
    return float(np.einsum("i,i->", a, b))


class SchurFactor:
    """A factorization of S with solves in the network's junction order and in the pattern's order."""

    def __init__(self, pattern: SchurPattern, matrix, solve_permuted):
        self.pattern = pattern
        self.matrix = matrix
        self.solve_permuted = solve_permuted

    @property
    def can_update(self) -> bool:
        """True when the factor can be changed in place by low-rank updates (CHOLMOD)."""
        return hasattr(self.solve_permuted, "update")

    def refactor(self, matrix) -> bool:
        """Factor ``matrix`` (same pattern) in place where the backend can (CHOLMOD); False if not
        done, and then this factor must not be used."""
        if not hasattr(self.solve_permuted, "refactor"):
            return False
        self.pattern.factorizations += 1
        if not self.solve_permuted.refactor(matrix):
            return False
        self.matrix = matrix
        return True

    def copy(self) -> "SchurFactor":
        """An independent copy that ``update`` and ``refactor`` may change (CHOLMOD only:
        ``can_update``); the original stays as it was."""
        return SchurFactor(self.pattern, self.matrix, self.solve_permuted.copy())

    def update(self, up, down) -> bool:
        """Change the factor in place to that of ``S + U U^T - V V^T`` (``SchurPattern.low_rank``)."""
        return self.solve_permuted.update(up, down)

    def __call__(self, b: np.ndarray) -> np.ndarray:
        """Solve S x = b for b (n_junctions,) or (n_junctions, p), both in junction order."""
        b = np.asarray(b, dtype=float)
        return self.solve_permuted(b[self.pattern.perm])[self.pattern.inv]
