"""Sparse factorizations of the solver's Schur complement ``S = A21 diag(w) A12`` (symmetric positive
definite), behind one small interface so the solver does not care which library does the work.

Backends:
- ``"cholmod"``: the sparse Cholesky factorization ``S = L L^T`` of CHOLMOD (SuiteSparse; Chen, Davis,
  Hager and Rajamanickam (2008), ACM TOMS 35(3), article 22) through scikit-sparse, the optional extra
  ``pip install "hydrant-calib[cholmod]"`` (needs SuiteSparse's headers: ``libsuitesparse-dev`` on
  Debian). The symbolic analysis (ordering, elimination tree, column counts) is made once per network
  and kept; each factorization is then numeric only, simplicial ``L D L^T`` (no BLAS needed), or
  supernodal ``L L^T`` (dense blocks through BLAS) where the factorization is large
  (``SUPERNODAL_MIN_WORK``; ``supernodal_from``), whichever BLAS CHOLMOD links.
- ``"superlu"``: scipy's SuperLU in symmetric mode without pivoting on the pre-ordered matrix. Always
  there (also in the Android build); the fallback.

The backend is chosen once per solver: ``CALIB_FACTOR=cholmod|superlu`` in the environment forces one,
``auto`` (the default) takes CHOLMOD when it imports. Both give the same answers within the solver's
tolerances (the reference tests run with each); only the time differs.

Fill-reducing orderings, chosen by measurement on grids of 10k-200k pipes (benchmarks/README.md):
METIS nested dissection (Karypis and Kumar (1998), SIAM J. Sci. Comput. 20(1)) through CHOLMOD's
analysis when it is there; else SuperLU's multiple minimum degree on A^T + A (Liu (1985), ACM TOMS
11(2)). Both are computed once per network by ``ordering``.
"""

from __future__ import annotations

import functools
import os
import warnings

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from calib.errors import InputError

BACKENDS = ("cholmod", "superlu")
ENV = "CALIB_FACTOR"
CHOLMOD_ORDERING = "metis"  # measured best over amd and nesdis from 10k pipes up (benchmarks/README.md)
MODE_ENV = "CALIB_CHOLMOD_MODE"
CHOLMOD_MODES = ("auto", "simplicial", "supernodal")
#: Work of a factorization (sum of squared column counts of L) from which CHOLMOD's supernodal
#: factorization is used, whatever BLAS CHOLMOD links: a fixed rule, so that a network's results do
#: not depend on timings made at run time. Measured on the benchmark grids (benchmarks/README.md,
#: B2 and A6), supernodal over simplicial time of one factorization:
#: - 2-core EPYC VM, 8 MB L3, reference BLAS: 0.96 / 0.72 / 0.50 at work 3.9e7 / 1.2e8 / 4.2e8
#:   (50k / 100k / 200k pipes); whole cold solves 1.11 / 0.88 / 0.60;
#: - the former machine, reference BLAS: 1.9 at 4.5e7, 1.19 at 4.2e8; with OpenBLAS (serial)
#:   2.0 / 1.6 / 0.70 at 4.5e7 / 1.2e8 / 4.2e8.
#: From 2e8 (between 100k and 200k pipes) one machine kind gains 2x where the other loses 19 %.
#: CHOLMOD's own switch (supernodal where flops / nnz(L) >= 40, ``Common->supernodal_switch``;
#: Chen, Davis, Hager and Rajamanickam 2008) would go supernodal from 20k pipes (flops / nnz(L)
#: 55; 1.2x slower on the VM) and puts the 7,938-pipe calibration grid (39.9) on its edge.
SUPERNODAL_MIN_WORK = 2e8
#: From this many junctions the first factorization of a network, which gives the column counts
#: of L and so the work the rule above needs, is supernodal too (then turned into ``L D L^T`` for
#: the counts: the same counts as a simplicial one); it stays simplicial where the work turns out
#: below ``SUPERNODAL_MIN_WORK``. The square grids' work is about 13 n^1.5 (n junctions), so 2e8
#: is reached from about 60k junctions; sparser (real) networks need more. Measured on the 2-core
#: EPYC VM at 200k pipes (100k junctions): the first factorization with its counts 0.79 s against
#: 1.28 s simplicial (benchmarks/README.md, A6).
SUPERNODAL_FIRST_JUNCTIONS = 50_000
_OPTIMIZED_BLAS = ("openblas", "mkl", "blis")


def cholmod_available() -> bool:
    """True when scikit-sparse's CHOLMOD binding imports."""
    try:
        import sksparse.cholmod  # noqa: F401
    except Exception:  # ImportError, or a binding built against another SuiteSparse
        return False
    return True


def choose(name: str | None = None) -> str:
    """The backend to use: ``name``, else ``$CALIB_FACTOR``, else ``auto`` (CHOLMOD when it imports)."""
    name = (name or os.environ.get(ENV) or "auto").strip().lower()
    if name == "auto":
        return "cholmod" if cholmod_available() else "superlu"
    if name not in BACKENDS:
        raise InputError(f"unknown factorization backend '{name}'", field=ENV,
                         expected="cholmod, superlu or auto")
    if name == "cholmod" and not cholmod_available():
        raise InputError("the CHOLMOD backend was asked for but scikit-sparse is not installed",
                         field=ENV, expected="superlu or auto, or install the extra: pip install "
                         "'hydrant-calib[cholmod]' (needs libsuitesparse-dev)")
    return name


@functools.lru_cache(maxsize=1)
def optimized_blas() -> str | None:
    """Path of the optimized BLAS (OpenBLAS, MKL, BLIS) loaded into this process for CHOLMOD, or
    None (the reference BLAS, no CHOLMOD, or not Linux: no /proc/self/maps). Read once: a process
    keeps the BLAS it loaded."""
    try:
        import sksparse.cholmod  # noqa: F401  (loads CHOLMOD and the BLAS it links)
        with open("/proc/self/maps") as maps:
            return optimized_in(line.split()[-1] for line in maps if "/" in line)
    except Exception:
        return None


def optimized_in(paths) -> str | None:
    """The first of the loaded libraries ``paths`` that is an optimized BLAS outside Python's
    packages: numpy's and scipy's own copies inside their wheels (under site-packages) do not
    count, CHOLMOD does not use them. Debian's alternatives load e.g.
    ``/usr/lib/x86_64-linux-gnu/openblas-serial/libblas.so.3``; the reference one lives in
    ``.../blas/libblas.so.3``."""
    for path in sorted(set(paths)):
        low = path.lower()
        tail = "/".join(low.split("/")[-2:])  # the library and its folder
        if ("site-packages" not in low and "dist-packages" not in low
                and any(name in tail for name in _OPTIMIZED_BLAS)):
            return path
    return None


def supernodal_from(name: str | None = None) -> float:
    """Work of a factorization from which CHOLMOD factors supernodally: ``name``, else
    ``$CALIB_CHOLMOD_MODE``, else ``auto``: ``SUPERNODAL_MIN_WORK``, whichever BLAS is loaded
    (``optimized_blas`` only says which, for the benchmarks). ``supernodal`` forces it at every
    size (0; for checks), ``simplicial`` never (inf)."""
    name = (name or os.environ.get(MODE_ENV) or "auto").strip().lower()
    if name not in CHOLMOD_MODES:
        raise InputError(f"unknown CHOLMOD mode '{name}'", field=MODE_ENV,
                         expected=", ".join(CHOLMOD_MODES))
    if name == "auto":
        return SUPERNODAL_MIN_WORK
    return 0.0 if name == "supernodal" else np.inf


def ordering(backend: str, pattern: sp.csc_matrix) -> np.ndarray:
    """Fill-reducing ordering of a symmetric pattern (old order), computed once: ``perm[new] = old``."""
    n = pattern.shape[0]
    if backend == "cholmod":
        from sksparse.cholmod import analyze
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # CHOLMOD's notes on index types are not for users
            return np.asarray(analyze(pattern, mode="simplicial",
                                      ordering_method=CHOLMOD_ORDERING).P(), dtype=np.int64)
    # SuperLU's minimum degree on A^T + A of a diagonally dominant matrix with this pattern
    a = abs(pattern)
    a = a + sp.identity(n, format="csc") * (a.sum(axis=0).max() + 1.0)
    lu = spla.splu(a.tocsc(), permc_spec="MMD_AT_PLUS_A", options=dict(SymmetricMode=True),
                   diag_pivot_thresh=0.0)
    # splu: Pr A Pc = L U with Pc[i, perm_c[i]] = 1, i.e. old column i moves to perm_c[i]
    return np.argsort(lu.perm_c).astype(np.int64)


class Factorizer:
    """Factors matrices of one fixed, pre-ordered sparsity pattern; ``factor(S)`` returns a solve
    function ``b -> S^-1 b`` (b of shape (n,) or (n, p)). ``work_ratio``: flops of a factorization
    over those of one preconditioned CG step (two triangular solves and a product with S), set by
    the first factorization; the solver caps its CG steps with it."""

    name = ""

    def __init__(self, template: sp.csc_matrix):
        self.n = template.shape[0]
        self.work_ratio: float | None = None
        #: entries of the factor(s) (L, or L and U), set by the first factorization: the memory a
        #: kept factorization holds (``NetworkSolver`` keeps as many as a budget allows)
        self.factor_nnz: int | None = None

    @staticmethod
    def _ratio(l_counts: np.ndarray, triangles_nnz: int, s_nnz: int) -> float:
        """Sum of squared column counts of L over 2 (nnz of both triangles + nnz of S)."""
        return float((l_counts.astype(float) ** 2).sum() / (2.0 * triangles_nnz + 2.0 * s_nnz))


class SuperLUFactorizer(Factorizer):
    name = "superlu"

    def factor(self, matrix: sp.csc_matrix):
        lu = spla.splu(matrix, permc_spec="NATURAL", diag_pivot_thresh=0.0,
                       options=dict(SymmetricMode=True))
        if self.work_ratio is None:
            self.work_ratio = self._ratio(np.diff(lu.L.tocsc().indptr), lu.L.nnz + lu.U.nnz,
                                          matrix.nnz)
            self.factor_nnz = int(lu.L.nnz + lu.U.nnz)
        return lu.solve


class CholmodFactorizer(Factorizer):
    """CHOLMOD with the symbolic analysis of the (pre-ordered) pattern made once and kept.

    Its factors can be changed in place by low-rank updates (``CholmodSolve.update``): the solver
    uses them for the few links whose 1/D changed much since the last factorization.
    ``update_cost`` (set with ``work_ratio``) is the work of a rank-one update that starts at each
    column, in the units of ``factor_work``: the column counts of L summed along the path from the
    column to the root of the elimination tree, which a rank-one update visits (Davis and Hager
    (1999), "Modifying a sparse Cholesky factorization", SIAM J. Matrix Anal. Appl. 20(3)).

    The first factorization gives the column counts: simplicial, or supernodal turned into
    ``L D L^T`` from ``SUPERNODAL_FIRST_JUNCTIONS`` junctions; from the second on the
    factorizations are supernodal where the work is at least ``supernodal_from`` (``mode``; by
    default ``SUPERNODAL_MIN_WORK``): ``supernodal``. A
    low-rank update turns a supernodal factor into a simplicial one (CHOLMOD's update works on
    ``L D L^T``)."""

    name = "cholmod"

    def __init__(self, template: sp.csc_matrix, mode: str | None = None):
        super().__init__(template)
        from sksparse.cholmod import CholmodNotPositiveDefiniteError, analyze
        self._not_pd = CholmodNotPositiveDefiniteError
        self._analyze = analyze
        self._template = template
        self._fallback = SuperLUFactorizer(template)
        self._supernodal_from = supernodal_from(mode)
        #: the first factorization is supernodal (large networks where the mode allows it)
        self._first_supernodal = bool(self.n >= SUPERNODAL_FIRST_JUNCTIONS
                                      and np.isfinite(self._supernodal_from))
        self._symbolic = self._analysis("supernodal" if self._first_supernodal else "simplicial")
        #: True once the factorizations are supernodal (set after the first one)
        self.supernodal = False
        self.update_cost: np.ndarray | None = None
        self.factor_work: float | None = None

    def _analysis(self, mode: str):
        """CHOLMOD's symbolic analysis of the template for ``mode``; the pattern is already in
        the fill-reducing order (``ordering``): no new permutation."""
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return self._analyze(self._template, mode=mode, ordering_method="natural")

    def factor(self, matrix: sp.csc_matrix):
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                f = self._symbolic.cholesky(matrix)
        except self._not_pd:
            # a zero pivot (rounding in a badly scaled S): LU without pivoting, as before this
            # backend existed, still gives the step
            return self._fallback.factor(matrix)
        first = self.work_ratio is None
        if not (self.supernodal or (first and self._first_supernodal)) and not np.all(f.D() > 0):
            # S is positive definite in exact arithmetic: a pivot <= 0 means rounding has made it
            # singular (e.g. a pipe of absurd diameter); said as SuperLU says an exact zero pivot.
            # (A supernodal L L^T stops at such a pivot itself: CholmodNotPositiveDefiniteError.)
            raise RuntimeError("matrix is numerically singular (a pivot of its L D L^T <= 0)")
        if not first:
            return CholmodSolve(f, self, self.supernodal)
        # L D L^T in one CSC matrix (D on the diagonal, no square roots); a supernodal L L^T is
        # turned into it here, in place. Its explicit zeros (the supernodes' padding) are no
        # entries of L: without them the counts are a simplicial factorization's. (``LD`` and
        # not scikit-sparse's ``L_D``, which builds L anew through tril + identity as CSR: 0.43
        # against 0.04 s at 200k pipes, the same counts.)
        LD = f.LD()
        LD.eliminate_zeros()
        counts = np.diff(LD.indptr)
        self.work_ratio = self._ratio(counts, 2 * LD.nnz, matrix.nnz)
        self.factor_work = float((counts.astype(float) ** 2).sum())
        self.factor_nnz = int(LD.nnz)
        self.update_cost = _path_sums(_etree(LD), counts.astype(float))
        if self.factor_work >= self._supernodal_from:
            if not self._first_supernodal:
                self._symbolic = self._analysis("supernodal")
            self.supernodal = True
        elif self._first_supernodal:
            self._symbolic = self._analysis("simplicial")
        return CholmodSolve(f, self, False)


class CholmodSolve:
    """``b -> S^-1 b`` with a CHOLMOD factor, which ``update`` changes in place. ``supernodal``:
    the factor is CHOLMOD's supernodal ``L L^T`` (else simplicial ``L D L^T``)."""

    def __init__(self, factor, factorizer: CholmodFactorizer | None = None,
                 supernodal: bool = False):
        self._f = factor
        self._factorizer = factorizer
        self.supernodal = supernodal

    def __call__(self, b):
        return self._f.solve_A(b)

    def copy(self) -> "CholmodSolve":
        """An independent copy (a memory copy of L, no factorization)."""
        return CholmodSolve(self._f.copy(), self._factorizer, self.supernodal)

    def refactor(self, matrix: sp.csc_matrix) -> bool:
        """Factor ``matrix`` (same pattern) into this factor's memory, which saves allocating a new
        one (5-7 % of a factorization at 50k-200k pipes). False when CHOLMOD finds it not
        positive definite: the caller then factors anew (``CholmodFactorizer.factor`` says why);
        also False for a simplicial factor where the factorizer has gone supernodal (a new
        supernodal factor is then made, faster than a simplicial one in place)."""
        if self._factorizer is not None and self._factorizer.supernodal and not self.supernodal:
            return False
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                self._f.cholesky_inplace(matrix)
        except Exception:  # CholmodNotPositiveDefiniteError; the factor is then not usable
            return False
        return self.supernodal or bool(np.all(self._f.D() > 0))

    def update(self, up: sp.csc_matrix | None, down: sp.csc_matrix | None) -> bool:
        """Make the factor that of ``S + U U^T - V V^T`` (columns of ``up`` = U, ``down`` = V, rows
        in the factor's order). False when a pivot is no longer > 0 (the factor is then unusable:
        the caller factors anew). A supernodal factor becomes simplicial ``L D L^T`` here."""
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            if up is not None and up.shape[1]:
                self._f.update_inplace(up)
                self.supernodal = False
            if down is not None and down.shape[1]:
                self._f.update_inplace(down, subtract=True)
                self.supernodal = False
        return bool(np.all(self._f.D() > 0))


def _etree(L: sp.csc_matrix) -> np.ndarray:
    """Parent of each column in the elimination tree of a lower triangular factor in CSC with its
    diagonal stored (-1: a root): the row of the first entry below the diagonal, one
    ``minimum.reduceat`` over the columns (every column holds its diagonal, so none is empty;
    ``np.minimum.at`` took 0.37-0.52 s at 200k pipes, this 0.02 s)."""
    n = L.shape[0]
    if n == 0:
        return np.zeros(0, dtype=np.int64)
    rows, cols = L.indices, np.repeat(np.arange(n), np.diff(L.indptr))
    below = np.where(rows > cols, rows, n)
    parent = np.minimum.reduceat(below, L.indptr[:-1]).astype(np.int64)
    parent[parent == n] = -1
    return parent


def _path_sums(parent: np.ndarray, value: np.ndarray) -> np.ndarray:
    """Sum of ``value`` over each column and its ancestors in the tree ``parent`` (pointer
    jumping: log2(depth) vectorised passes)."""
    total = value.copy()
    up = parent.copy()
    while (up >= 0).any():
        has = up >= 0
        total[has] += total[up[has]]
        nxt = np.full_like(up, -1)
        nxt[has] = up[up[has]]
        up = nxt
    return total


def factorizer(backend: str, template: sp.csc_matrix) -> Factorizer:
    """The factorizer of ``backend`` for matrices with the pattern of ``template`` (pre-ordered)."""
    return CholmodFactorizer(template) if backend == "cholmod" else SuperLUFactorizer(template)
