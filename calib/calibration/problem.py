"""The weighted least-squares problem of C-factor calibration: parameters, residuals and Jacobian.

Parameters, in this order: one Hazen-Williams C per group; optionally a demand factor per test day;
optionally a grade offset [m] per source per test where boundary.csv gives no head for it.

Each test gives two snapshots: *static* (normal demand) and *residual* (normal demand plus the test's
flows at their nodes). Both kinds of reading are observations: static readings mostly inform the source
grades and demands, residual readings the C-factors. A reading's residual row is
``(H_sim - H_obs) / sigma`` in head [m / m]; a prior adds rows ``(C_g - C_prior_g) / spread_g``.

The Jacobian is analytic: at each converged snapshot, implicit differentiation of the solver's
equations (Todini and Pilati global gradient system) gives dH/dp for all parameters with one
factorization (``NetworkSolver.sensitivities``):
``[[D, A12], [A21, 0]] [dQ; dH] = -[dF1/dp; dF2/dp]``, with dF1_k/dC_g = dh_k/dC_k for pipes k of
group g (Hazen-Williams: -1.852 h_k / C_k), dF2_i/d(demand factor) = -base demand_i, and for a source
grade H_s: dF1_k = -1 where from_k = s, +1 where to_k = s.
"""

from __future__ import annotations

import copy
import itertools
from collections import OrderedDict
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from calib.errors import CalibrationError, ConvergenceError


@dataclass
class Parameter:
    """One fitted unknown."""

    name: str
    kind: str  # "c" | "demand" | "offset"
    index: int  # group number, day number, or (test, source) position in the offset list
    x0: float
    lower: float
    upper: float


class _Solved(list):
    """Per-snapshot results of one ``x``, with the stacked results they were split from, and (once
    ``jacobian`` asked for them) the head sensitivities at that ``x``: ``dH`` = (number of
    parameters, per snapshot dH/dp at the junctions or None)."""

    def __init__(self, results, stacks, stacked, tag: int | None = None):
        super().__init__(results)
        self.stacks, self.stacked = stacks, stacked
        self.dH = None
        # names these solutions to the processes that own snapshots (``tasks.SnapshotPool``)
        self.tag = next(_TAGS) if tag is None else tag


_TAGS = itertools.count(1)


#: Solutions kept per fit (``_Recent``): a least-squares fit comes back to the point before its
#: last, rejected, trial step; points further back are handed on by the callers that need them
#: (``recall``). Each holds every snapshot's solution: on large networks many would weigh.
RECENT_KEPT = 2


class _Recent:
    """The snapshots' solutions at the last few parameter vectors (``x.tobytes()`` -> ``_Solved``),
    most recent last: the next solve warm-starts from the last. One store is shared by the
    problems of a fit over the same snapshots (``CalibrationProblem.share``): a solution depends
    on the snapshots and ``x`` only, not on the readings or their weights."""

    def __init__(self, keep: int = RECENT_KEPT):
        self.keep = keep
        self.items: dict = {}
        #: per snapshot, the solver that solves it and keeps its state (``_owned_solvers``):
        #: None until the first solve decides, [] where one solver solves them all
        self.solvers = None
        #: ``tasks.SnapshotPool`` while the snapshots are shared out between processes; None
        #: until the first solve decides, False where they are not (or no longer)
        self.pool = None

    def get(self, key):
        """The solutions at ``key`` (then the most recent), or None."""
        res = self.items.pop(key, None)
        if res is not None:
            self.items[key] = res
        return res

    def put(self, key, results) -> None:
        self.items.pop(key, None)
        self.items[key] = results
        while len(self.items) > self.keep:
            del self.items[next(iter(self.items))]

    @property
    def last(self):
        """``(key, solutions)`` of the most recent, or ``(None, None)``."""
        return next(reversed(self.items.items()), (None, None))


#: Stacks of snapshots (``stack_size``), by measurement (benchmarks/README.md, "A stacked
#: snapshots"): warm evaluations cost 0.4-0.6x of one-by-one solves at 481-1,105 pipes, about the
#: same at 2,000, more from 4,000 pipes up (0.8-1.1x slower at 7,938); stacks of 7-14 copies of
#: the 531-pipe demo town beat one stack of 28 (the stack iterates until its slowest copy is done).
STACK_MAX_NETWORK_PIPES = 2_000
STACK_MAX_PIPES = 8_000  # the largest stack, over all its copies


def stack_size(network, limit: int | None = None) -> int:
    """How many snapshots of ``network`` one stack holds (1: none stacked). On small networks a
    solve is mostly per-iteration Python work, which a stack pays once for all its copies; on
    larger ones the stacked arrays' own work dominates and a stack gains nothing (measured).
    ``limit``: the largest stack in pipes over its copies (default ``STACK_MAX_PIPES``, and no
    stack above ``STACK_MAX_NETWORK_PIPES`` a copy)."""
    if limit is None:
        if network.n_pipes > STACK_MAX_NETWORK_PIPES:
            return 1
        limit = STACK_MAX_PIPES
    return max(1, int(limit) // max(network.n_pipes, 1))


#: Memory for the factorizations kept beside the solutions of snapshots that own their solver
#: state (``CalibrationProblem._owned_solvers``), over all of them: at least one each, else they
#: share one solver. The solver's own budget (``KEPT_FACTOR_BYTES``, 32 MB: the 7,938-pipe
#: grid's 21 snapshots at 0.84 MB a factorization).
OWNED_BYTES = 32e6
#: Bytes of one kept factorization per pipe where no factorization was made yet to say (0.84 MB
#: for the 7,938-pipe grid's, measured with CHOLMOD).
FACTOR_BYTES_PER_PIPE = 110.0


def _factor_bytes(solver, network) -> float:
    """Memory of one factorization kept by ``solver`` (as ``NetworkSolver._capacity`` counts it),
    estimated from the pipes before its first factorization."""
    factorizer = getattr(getattr(solver, "pattern", None), "_factorizer", None)
    nnz = getattr(factorizer, "factor_nnz", None)
    if nnz is None:
        return FACTOR_BYTES_PER_PIPE * max(network.n_pipes, 1)
    return 12.0 * nnz + 8.0 * solver.nj


def _snapshot_solver(solver, capacity: int):
    """A solver for one snapshot: ``solver``'s network, pattern, ordering and settings (shared,
    not copied), its own state between solves (last and kept factorizations), keeping at most
    ``capacity`` factorizations beside its solutions."""
    own = copy.copy(solver)
    own._kept = OrderedDict()
    own._factor = None
    own._matrix = None
    own._rough_memo = None
    own._capacity = lambda: capacity  # the instance's budget in place of the solver's
    return own


class CalibrationProblem:
    """Residuals and Jacobian of the calibration for one network, one set of readings and groups.

    ``solver`` follows the ``calib.hydraulics.NetworkSolver`` contract; it is built here when None.
    ``prior`` is a ``priors.GroupPrior`` or None. ``progress(n_solves)`` is called after every solve.
    ``warm``: last solution per snapshot label, shared between problems over the same tests (a refit
    on a subset starts each snapshot from its own last state, not from another test's).
    ``stack``: solve the snapshots that share a demand factor in stacks, each one block-diagonal
    network (``calib.hydraulics.stacked``): one solve and one sensitivity solve for all its copies;
    an int is the largest stack in pipes over its copies, None the measured default
    (``stack_size``), False none. Same results to the solver's tolerance.
    """

    def __init__(self, network, tests, grouping, prior=None, c_bounds=(40.0, 160.0),
                 demand_factor: bool = False, source_offsets: bool = False, solver=None,
                 progress=None, x0=None, warm: dict | None = None, stack: bool | None = None):
        if solver is None:
            from calib.hydraulics import NetworkSolver
            solver = NetworkSolver(network, headloss="hazen-williams")
        self.network, self.tests, self.grouping, self.prior = network, tests, grouping, prior
        self.solver = solver
        self.progress = progress
        self.warm = {} if warm is None else warm
        self.n_solves = 0  # snapshot solves (a stacked solve of K snapshots counts K)
        self.n_solver_calls = 0  # calls of a solver (a stacked solve counts 1)
        self.n_iterations = 0  # Newton iterations over those calls
        lo, hi = float(c_bounds[0]), float(c_bounds[1])
        if not 0 < lo < hi:
            raise CalibrationError(f"C bounds {lo:g}, {hi:g} are not an increasing positive pair")
        self.c_bounds = (lo, hi)
        nj = network.n_junctions

        # --- parameters ---------------------------------------------------------------------
        params: list[Parameter] = []
        base_c = grouping.length_weighted(network, network.roughness)  # the start without a prior
        if prior is not None:
            base_c = np.asarray(prior.c, float)
        for g, name in enumerate(grouping.names):
            params.append(Parameter(f"C {name}", "c", g, float(np.clip(base_c[g], lo + 1e-6, hi - 1e-6)),
                                    lo, hi))
        used_tests = sorted(set(tests.test.tolist()))
        if demand_factor:
            used_days = sorted({int(tests.day[t]) for t in used_tests})
            for d in used_days:
                label = tests.days[d] or "all tests"
                params.append(Parameter(f"demand factor {label}", "demand", d, 1.0, 0.1, 5.0))
        self.offsets: list[tuple[int, int]] = []  # (test, source node)
        if source_offsets:
            for t in used_tests:
                for s in range(nj, network.n_nodes):
                    if s not in tests.source_head[t]:
                        params.append(Parameter(f"grade offset {network.node_ids[s]} in test "
                                                f"{tests.test_ids[t]}", "offset", len(self.offsets),
                                                0.0, -30.0, 30.0))
                        self.offsets.append((t, s))
        self.params = params
        self.kind = np.array([p.kind for p in params], dtype=object)
        self.c_cols = np.flatnonzero(self.kind == "c")
        self.x0 = np.array([p.x0 for p in params]) if x0 is None else np.asarray(x0, float)
        self.lower = np.array([p.lower for p in params])
        self.upper = np.array([p.upper for p in params])
        self.day_col = {p.index: i for i, p in enumerate(params) if p.kind == "demand"}
        self.offset_col = {self.offsets[p.index]: i for i, p in enumerate(params) if p.kind == "offset"}
        self._test_offsets: dict[int, list[tuple[int, int]]] = {}  # test -> [(source node, column)]
        for (t, s), col in self.offset_col.items():
            self._test_offsets.setdefault(t, []).append((s, col))

        # --- snapshots: (test, kind) pairs that have readings; identical loadings solved once ---
        # (e.g. the static snapshots of tests at the same tank level), so a key holds everything a
        # snapshot depends on: source grades given, its own offset columns, its day, its flows
        all_pairs = sorted({(int(t), str(k)) for t, k in zip(tests.test, tests.kind)})
        unique: dict = {}
        pos = {}
        for t, k in all_pairs:
            key = (tuple(sorted(tests.source_head[t].items())),
                   tuple(c for _s, c in self._test_offsets.get(t, ())),
                   self.day_col.get(int(tests.day[t])),
                   tuple(sorted(tests.flows[t].items())) if k == "residual" else ())
            pos[(t, k)] = unique.setdefault(key, len(unique))
        first = {}
        for pair, i in pos.items():
            first.setdefault(i, pair)
        self.pairs = [first[i] for i in range(len(unique))]
        self.reading_snapshot = np.array([pos[(int(t), str(k))] for t, k in zip(tests.test, tests.kind)],
                                         dtype=np.int64)
        self.h_obs = tests.hgl
        self.sigma_h = tests.sigma_head
        if len(self.h_obs) == 0:
            raise CalibrationError("no gauge readings to fit")

        # --- constant parts of dF/dp --------------------------------------------------------
        n_pipes = network.n_pipes
        self.n_links = n_pipes + len(network.pumps) + len(network.valves)  # solver's link order
        link_from = np.concatenate([network.pipe_from, network.pumps.from_node,
                                    network.valves.from_node]).astype(np.int64)
        link_to = np.concatenate([network.pipe_to, network.pumps.to_node,
                                  network.valves.to_node]).astype(np.int64)
        self._source_incidence = {}
        for (t, s), col in self.offset_col.items():
            v = np.where(link_from == s, -1.0, 0.0) + np.where(link_to == s, 1.0, 0.0)
            self._source_incidence[(t, s)] = (np.flatnonzero(v), v[v != 0])
        self.grouped = np.flatnonzero(grouping.index >= 0)
        self._recent = _Recent()
        self._rows = [np.flatnonzero(self.reading_snapshot == si) for si in range(len(self.pairs))]
        # --- stacks: snapshots that share a demand factor column are solved as one network -----
        size = 1 if stack is False else stack_size(network, None if stack is None or stack is True else stack)
        by_col: dict = {}
        for i, (t, _k) in enumerate(self.pairs):
            by_col.setdefault(self.day_col.get(int(tests.day[t])), []).append(i)
        self.stacks = []
        for members in by_col.values():  # near-equal stacks of at most ``size`` snapshots
            n = -(-len(members) // size)
            self.stacks += [m.tolist() for m in np.array_split(members, n) if len(m) > 1]

    # --- sizes ----------------------------------------------------------------------------------
    @property
    def n_params(self) -> int:
        return len(self.params)

    @property
    def n_readings(self) -> int:
        return len(self.h_obs)

    @property
    def n_prior_rows(self) -> int:
        return 0 if self.prior is None else self.grouping.n_groups

    # --- solutions kept ---------------------------------------------------------------------------
    def share(self, other: "CalibrationProblem") -> bool:
        """Use ``other``'s kept solutions when both solve the same snapshots (a refit on a subset of
        the readings): exact at the same ``x``, warm starts elsewhere. True when shared."""
        if other.pairs != self.pairs:
            return False
        self._recent = other._recent
        return True

    def shares_solutions_with(self, other: "CalibrationProblem") -> bool:
        """True when this problem and ``other`` keep one set of solutions (``share`` made them):
        what one solves, the other reads without solving."""
        return self._recent is other._recent

    def recall(self, x, results) -> None:
        """Keep ``results`` (from ``solve(x)``) again as the most recent solution at ``x``."""
        self._recent.put(np.asarray(x, float).tobytes(), results)

    @property
    def _cache_key(self):
        """``x.tobytes()`` of the last solution (the next solve's warm start)."""
        return self._recent.last[0]

    @property
    def _cache(self):
        return self._recent.last[1]

    # --- model ------------------------------------------------------------------------------------
    def roughness(self, x) -> np.ndarray:
        """Per-pipe C for parameter vector ``x`` (pipes in no group keep the model's C)."""
        return self.grouping.per_pipe(np.asarray(x)[self.c_cols], self.network.roughness)

    def snapshots(self, x):
        """The ``Snapshot`` of every (test, kind) pair at parameters ``x``."""
        from calib.hydraulics import Snapshot
        net, tests = self.network, self.tests
        out = []
        for t, kind in self.pairs:
            heads = {str(net.node_ids[s]): float(h) for s, h in tests.source_head[t].items()}
            for s, col in self._test_offsets.get(t, ()):
                heads[str(net.node_ids[s])] = float(net.source_head[s - net.n_junctions] + x[col])
            col = self.day_col.get(int(tests.day[t]))
            factor = float(x[col]) if col is not None else 1.0
            extra = {}
            if kind == "residual":
                extra = {str(net.node_ids[n]): float(q) for n, q in tests.flows[t].items()}
            out.append(Snapshot(demand_factor=factor, extra_demand=extra, source_head=heads,
                                label=f"{tests.test_ids[t]} {kind}"))
        return out

    def solve(self, x):
        """Solve every snapshot at ``x`` (kept for the last few ``x``): list of ``SolveResult``."""
        x = np.asarray(x, float)
        key = x.tobytes()
        known = self._recent.get(key)
        if known is not None:
            return known
        roughness = self.roughness(x)
        snaps = self.snapshots(x)
        self._x_now = x  # named in a convergence error
        if self.stacks:
            results = self._solve_stacked(x, roughness, snaps)
            if results is not None:
                self._recent.put(key, results)
                return results
        if self._owned_solvers():
            results = self._solve_owned(roughness, snaps)
            self._recent.put(key, results)
            return results
        results = []
        # not solve_many: a warm start from the same snapshot at the last parameters beats one from
        # the previous snapshot (a few iterations instead of many)
        previous = self._cache
        for i, snap in enumerate(snaps):
            warm = (previous[i] if previous is not None else self.warm.get(snap.label)
                    or (results[-1] if results else None))
            try:
                results.append(self._solve_alone(snap, roughness, warm))
            except ConvergenceError as exc:
                raise self._not_converged(snap, exc) from exc
        results = _Solved(results, stacks=[], stacked=[])
        self._recent.put(key, results)
        return results

    # --- snapshots that own their solver state (and may be shared out between processes) -----
    def _owned_solvers(self) -> list:
        """Per snapshot, a solver of its own (``_snapshot_solver``), or [] where one solver solves
        them all; decided at the first solve of the solutions' store (``_Recent``).

        A snapshot with a solver of its own gives numbers that depend on its own history only
        (its warm starts and the factorizations kept beside its own solutions), not on the other
        snapshots solved between: so the snapshots can be shared out between processes that keep
        them (``tasks.SnapshotPool``) with the same numbers, to the last bit, at any number of
        processes. Not for stacked snapshots (one solve for a stack), nor where the snapshots'
        kept factorizations would not fit in the solver's memory budget at one each
        (``OWNED_BYTES``), nor for a solver other than a ``NetworkSolver``: there the one
        solver's numbers stay as they were."""
        recent = self._recent
        if recent.solvers is None:
            from calib.hydraulics import NetworkSolver
            per = _factor_bytes(self.solver, self.network)
            n = len(self.pairs)
            # (another solver, e.g. a wrapper that counts calls, keeps its own ways: one solver)
            if self.stacks or n < 2 or n * per > OWNED_BYTES or \
                    not isinstance(self.solver, NetworkSolver):
                recent.solvers = []
            else:
                cap = max(1, int(OWNED_BYTES // (n * per)))
                recent.solvers = [_snapshot_solver(self.solver, cap) for _ in range(n)]
        return recent.solvers

    def _solve_owned(self, roughness, snaps) -> "_Solved":
        """``solve`` with a solver per snapshot, each warm-started from its own last solution (or
        the shared ``warm``); where one has none (a first solve), from snapshot 0's solution at
        this ``x``, which is then solved first. Shared out between processes by the store's
        ``pool`` where it has one (``_pool``), the same numbers either way."""
        previous = self._cache
        warm = [previous[i] if previous is not None else self.warm.get(s.label)
                for i, s in enumerate(snaps)]
        pool = self._pool()
        tag = next(_TAGS)
        if pool:
            try:
                results = pool.solve(self, tag, roughness, snaps, warm)
            except pool.Lost:  # a worker died: the rest here (warm starts without their factors)
                self._recent.pool = False
                pool.close()
                return self._solve_owned(roughness, snaps)
        else:
            results = [None] * len(snaps)
            for i, snap in enumerate(snaps):
                start = warm[i] if warm[i] is not None or i == 0 else results[0]
                results[i] = self._solve_snapshot(i, snap, roughness, start)
                self._count(snap, results[i])
        return _Solved(results, stacks=[], stacked=[], tag=tag)

    def _solve_snapshot(self, i, snap, roughness, warm):
        """Snapshot ``i`` by its own solver (not counted: ``_count``); a convergence failure
        becomes an error that names the snapshot and the parameters."""
        try:
            return self._recent.solvers[i].solve(snap, roughness=roughness, warm_start=warm)
        except ConvergenceError as exc:
            raise self._not_converged(snap, exc) from exc

    def _count(self, snap, res) -> None:
        """A solve of one snapshot by one solver call: counted and kept (``_kept``)."""
        self.n_solver_calls += 1
        self.n_iterations += res.iterations
        self._kept(snap, res)

    def _pool(self):
        """The store's ``tasks.SnapshotPool`` (opened at its first solve where that pays, see
        ``tasks.SnapshotPool.start``), or False."""
        recent = self._recent
        if recent.pool is None:
            from calib.calibration import tasks
            recent.pool = tasks.SnapshotPool.start(self) or False
        return recent.pool if recent.pool and not recent.pool.closed else False

    def _snapshot_dH(self, si, res, solver) -> np.ndarray:
        """dH/dp at the junctions of snapshot ``si`` at its solution ``res``, by ``solver``."""
        dF1, dF2 = self._rhs(si, np.asarray(solver.dheadloss_droughness(res), float))
        dH, _ = solver.sensitivities(res, dF1, dF2)
        return dH.toarray() if sp.issparse(dH) else np.asarray(dH)

    def _not_converged(self, snap, exc) -> CalibrationError:
        values = ", ".join(f"{p.name} = {v:.4g}" for p, v in zip(self.params, self._x_now))
        return CalibrationError(
            f"the solver did not converge for snapshot '{snap.label}' at {values}: {exc}. "
            "Check the network (closed valves, isolated areas) or narrow --c-bounds.")

    def _kept(self, snap, res) -> None:
        """Keep ``res`` as the last solution of ``snap`` (the next warm start) and count it."""
        self.warm[snap.label] = res
        self.n_solves += 1
        if self.progress is not None:
            self.progress(self.n_solves)

    def _solve_alone(self, snap, roughness, warm):
        """One snapshot by the solver: one call, kept and counted."""
        res = self.solver.solve(snap, roughness=roughness, warm_start=warm)
        self.n_solver_calls += 1
        self.n_iterations += res.iterations
        self._kept(snap, res)
        return res

    def _solve_stacked(self, x, roughness, snaps):
        """``solve`` by stacks (snapshots outside a stack alone); None when a stacked solve fails
        (the caller then solves snapshot by snapshot, whose errors name the snapshot)."""
        from calib.errors import CalibError
        from calib.hydraulics.stacked import stacked_solver
        previous, last = self._cache, self._stacked
        results = [None] * len(snaps)
        stacked = []
        for si, members in enumerate(self.stacks):
            ss = stacked_solver(self.solver, len(members))
            if last is not None:
                warm = last[si]
            else:
                warm = [previous[i] if previous is not None else self.warm.get(snaps[i].label)
                        for i in members]
                warm = warm if all(w is not None for w in warm) else None
            try:
                res, parts = ss.solve([snaps[i] for i in members], roughness, warm)
            except CalibError:  # solved one by one, the error names the snapshot and original ids
                return None
            stacked.append(res)
            self.n_solver_calls += 1
            self.n_iterations += res.iterations
            for i, r in zip(members, parts):
                results[i] = r
                self._kept(snaps[i], r)
        alone = [i for i, r in enumerate(results) if r is None]
        for i in alone:
            warm = previous[i] if previous is not None else self.warm.get(snaps[i].label)
            try:
                results[i] = self._solve_alone(snaps[i], roughness, warm)
            except ConvergenceError:
                return None
        return _Solved(results, stacks=self.stacks, stacked=stacked)

    @property
    def _stacked(self):
        """The stacked results behind the last solution (one per stack), when it was solved in
        the same stacks (a problem over the same snapshots may share its solutions)."""
        return self._stacked_of(self._cache)

    def _stacked_of(self, results):
        ok = isinstance(results, _Solved) and results.stacks and results.stacks == self.stacks
        return results.stacked if ok else None

    def simulated_head(self, x) -> np.ndarray:
        """Simulated grade at each reading's node [m]."""
        results = self.solve(x)
        heads = np.stack([np.asarray(r.head, float) for r in results])
        return heads[self.reading_snapshot, self.tests.node]

    def residuals(self, x) -> np.ndarray:
        """Weighted residual vector: readings ``(H_sim - H_obs)/sigma`` then prior rows."""
        r = (self.simulated_head(x) - self.h_obs) / self.sigma_h
        if self.prior is not None:
            x = np.asarray(x, float)
            r = np.concatenate([r, (x[self.c_cols] - self.prior.c) / self.prior.spread])
        return r

    def jacobian(self, x) -> np.ndarray:
        """Analytic Jacobian of ``residuals`` (dense, rows x parameters): one factorization per
        snapshot, or per stack of snapshots (``stack``). The head sensitivities are kept with the
        solutions at ``x``: another call there (other weights, another subset of the readings over
        the same snapshots) only weights them again."""
        x = np.asarray(x, float)
        dH = self._head_sensitivities(self.solve(x))
        J = np.zeros((self.n_readings + self.n_prior_rows, self.n_params))
        node = self.tests.node
        for si, rows in enumerate(self._rows):
            if rows.size:
                J[rows] = dH[si][node[rows]] / self.sigma_h[rows, None]
        if self.prior is not None:
            n = self.n_readings
            J[n + np.arange(len(self.c_cols)), self.c_cols] = 1.0 / self.prior.spread
        return J

    def _head_sensitivities(self, results) -> list:
        """Per snapshot, dH/dp at the junctions at the solutions ``results`` (None for a snapshot
        without readings here), computed once per solution (``_Solved.dH``)."""
        known = results.dH if isinstance(results, _Solved) else None
        if known is not None and known[0] == self.n_params and \
                all(known[1][si] is not None for si, rows in enumerate(self._rows) if rows.size):
            return known[1]
        p = self.n_params
        dHs = [None] * len(results)
        stacked = self._stacked_of(results) or []
        if stacked:
            from calib.hydraulics.stacked import stacked_solver
        for members, res in zip(self.stacks, stacked):
            ss = stacked_solver(self.solver, len(members))
            st = ss.stack
            dhdc = np.asarray(ss.dheadloss_droughness(res), float)
            dF1 = np.zeros((st.link_map.size, p))
            dF2 = np.zeros((st.junction_map.size, p))
            for c, si in enumerate(members):
                b1, b2 = self._rhs(si, dhdc[st.pipe_map[c]])
                dF1[st.link_map[c]] = b1
                dF2[st.junction_map[c]] = b2
            dH, _ = ss.sensitivities(res, dF1, dF2)
            dH = dH.toarray() if sp.issparse(dH) else np.asarray(dH)
            for c, si in enumerate(members):
                dHs[si] = dH[st.junction_map[c]]
        need = [si for si in range(len(results)) if self._rows[si].size and dHs[si] is None]
        owned = self._owned_solvers() if isinstance(results, _Solved) and not results.stacks \
            else []
        pool = self._pool() if owned else False
        if pool and need:
            try:
                for si, dH in pool.sensitivities(self, results, need).items():
                    dHs[si] = dH
                need = []
            except pool.Lost:  # a worker died: the rest here
                self._recent.pool = False
                pool.close()
        for si in need:
            dHs[si] = self._snapshot_dH(si, results[si], owned[si] if owned else self.solver)
        if isinstance(results, _Solved):
            results.dH = (p, dHs)
        return dHs

    def _rhs(self, si, dhdc):
        """``-dF/dp`` parts of snapshot ``si``: (dF1 per link, dF2 per junction), dense p columns;
        ``dhdc`` the pipes' dh/dC at its solution."""
        t, _kind = self.pairs[si]
        p, nj = self.n_params, self.network.n_junctions
        grp = self.grouping.index[self.grouped]
        # dense right-hand sides: the sensitivities solve them dense anyway, and building two
        # sparse matrices per snapshot cost more than the few thousand zeros they hold
        dF1 = np.zeros((self.n_links, p))
        dF1[self.grouped, self.c_cols[grp]] = dhdc[self.grouped]
        for s, col in self._test_offsets.get(t, ()):
            links, vals = self._source_incidence[(t, s)]
            dF1[links, col] += vals
        dF2 = np.zeros((nj, p))
        col = self.day_col.get(int(self.tests.day[t]))
        if col is not None:
            dF2[:, col] = -self.network.demand
        return dF1, dF2

    def jacobian_fd(self, x, step: float = 1e-6) -> np.ndarray:
        """Central finite-difference Jacobian (for checks and the benchmark): 2 p solves per snapshot,
        one snapshot at a time even where ``solve`` stacks them: in a stack every copy iterates
        until the slowest has converged, so a parameter of one copy moves the others' heads within
        the solver's tolerance (about 1e-10 m), which a difference quotient with a 1e-6 step would
        show as derivatives of up to 1e-4 where the true one is 0."""
        x = np.asarray(x, float)
        stacks, self.stacks = self.stacks, []
        try:
            cols = []
            for j in range(self.n_params):
                h = step * max(1.0, abs(x[j]))
                xp, xm = x.copy(), x.copy()
                xp[j] += h
                xm[j] -= h
                cols.append((self.residuals(xp) - self.residuals(xm)) / (2 * h))
        finally:
            self.stacks = stacks
        return np.column_stack(cols)
