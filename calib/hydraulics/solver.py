"""Steady-state network solver: the global gradient method of Todini and Pilati (1988).

Unknowns are the flows Q of all links (pipes, then pumps) and the heads H of the junctions; the
fixed-grade sources hold their heads. Newton's method on the energy and mass equations

    F1_k = h_k(Q_k) - (H[from_k] - H[to_k]) = 0        (every open link)
    F2_i = sum(Q_k, to_k = i) - sum(Q_k, from_k = i) - d_i = 0    (every junction)

eliminates the flow correction and solves, per iteration, the symmetric positive definite system
``(A21 D^-1 A12) dH = F2 - A21 D^-1 F1`` with ``D = dh/dQ``, then ``dQ = -D^-1 (F1 + A12 dH)``.
Source: Todini, E. and Pilati, S. (1988), "A gradient algorithm for the analysis of pipe networks",
in Coulbeck and Orr (eds), Computer Applications in Water Supply, vol. 1, 1-20.

Control valves (reducing, sustaining, flow-limiting, throttle) are links after the pumps, their
states and equations kept in ``calib.hydraulics.valves`` (small hooks here, marked "valves").
Closed pipes, closed check valves and idle pumps leave the equations (their flow is exactly 0);
junctions that this cuts off from every source are reported in ``SolveResult.isolated``.
Not here: the head-loss laws (``headloss``), the sparse algebra (``assembly``), file reading.
"""

from __future__ import annotations

import itertools
from collections import OrderedDict

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from calib.errors import ConvergenceError, InputError, NetworkError, Problem
from calib.hydraulics import headloss as hl
from calib.hydraulics import checks, sensitivity
from calib.hydraulics.assembly import SchurPattern
from calib.hydraulics.memo import Memo
from calib.hydraulics.result import SolveResult
from calib.hydraulics.snapshot import Snapshot, resolve
from calib.hydraulics.valves import CLOSED as VALVE_CLOSED
from calib.hydraulics.valves import STATE_CHECK_FLOW, STATE_HEAD_TOL, ValveLinks, annotate
from calib.network.model import PipeStatus
from calib.units import FT, GAMMA_WATER

HEADLOSS_MODELS = ("hazen-williams", "darcy-weisbach")
#: Columns (active pressure valves in one connected part of the network) for which the Newton
#: step always couples the valves' flow changes to their far ends (``ValveLinks.couple``); more
#: only while their solves cost at most a quarter of a factorization (work ratio / 4). Measured:
#: the demo town's two reducing-valve stations, 3,756 -> 3,496 iterations over its fit solved
#: one snapshot at a time, 410 -> 278 in stacks of 14 copies (2 columns for 28 valves); grids
#: with 7 and 38 such valves in one part gained nothing.
COUPLED_VALVES = 2
#: Memory for the factorizations kept beside solutions (``NetworkSolver._kept``): 32 MB holds
#: 38 of the 7,938-pipe grid's (0.84 MB each: every snapshot of its fit, 21) and one at 200k
#: pipes; at most ``KEPT_FACTORS``. Small enough to stay in a server's last-level cache.
KEPT_FACTOR_BYTES = 32e6
KEPT_FACTORS = 64
#: Conjugate gradients (``_reuse``) stop at this fraction of the mass tolerance: their residual is
#: the junctions' mass imbalance after the Newton step, which the stop test then holds to the
#: tolerance; the half leaves room for the rounding between CG's residual and the imbalance
#: recomputed from the flows. Measured on the 7,938-pipe grid fit's 1,071 recorded solves
#: (benchmarks/README.md, B2): 0.1 -> 0.5 made 19,676 -> 17,765 triangular solves in the same
#: 3,165 Newton iterations (0.9: 17,016 and 3,164).
CG_MASS_FRACTION = 0.5
#: The same with control valves: their flow steps (``ValveLinks.flow_step``) leave imbalance of
#: their own beside CG's residual. At 0.5 a stack of the demo town's copies (reducing valves,
#: SuperLU) stalled at a mass error of 9.6e-10 m3/s, above its tolerance; 0.1-0.3 converge.
CG_MASS_FRACTION_VALVES = 0.1
_KEYS = itertools.count(1)  # keys of kept factorizations, unique across solvers


class _KeptFactor:
    """A factorization with the link weights, extra diagonal and fixed junctions of the matrix it
    now factors (updated in place by ``NetworkSolver._reuse``). ``shared``: also kept beside a
    solution (``NetworkSolver._kept``), so it must be copied before it is changed."""

    def __init__(self, factor, w, extra, fixed):
        self.factor, self.w, self.extra, self.fixed = factor, w, extra, fixed
        self.stale = False
        self.shared = False

    def own(self) -> "_KeptFactor":
        """This factorization, or a copy of it where it is shared (kept beside a solution)."""
        if not self.shared:
            return self
        return _KeptFactor(self.factor.copy(), self.w.copy(), self.extra.copy(), self.fixed.copy())


class NetworkSolver:
    """Solve snapshots of one network; the sparsity pattern and ordering are built once here.
    A solver keeps state between solves (last factorization, trace): use one per thread.

    Parameters (all SI):
    - ``headloss``: ``"hazen-williams"`` (default; ``roughness`` = C) or ``"darcy-weisbach"``
      (``roughness`` = absolute roughness height [m], from ``network.roughness_height``).
    - ``q_eps`` [m3/s]: Hazen-Williams regularization flow (``headloss.hazen_williams_law``).
    - Convergence, all at the returned point: largest flow change <= ``flow_tol`` x reference flow
      (total demand, or the largest flow when larger); largest head change <= ``head_tol`` [m];
      largest energy residual <= ``energy_tol`` [m]; largest mass-balance error <=
      max(``mass_tol`` x total demand, ``mass_tol_abs`` [m3/s]); and no status change in the last step.
    - ``head_step=False`` leaves the head change out of that rule: the solve then stops on the
      residuals at the returned point (energy, mass) and the flow change alone. The last head
      change lags one iteration behind the heads' error (after a Newton step the error left is
      what the energy residual drives, ``S dH = -A21 D^-1 F1``; the heads of a solve's first
      iterate are always far from its start, which is not warm-started), so a caller that reads
      heads to a tolerance asks for an energy residual well below it instead
      (``calib.calibration.fit.FIT_TOLERANCES``). Not with control valves: their states are
      checked again only once the heads have settled (``valves.STATE_HEAD_TOL``).
    - ``max_iterations``; ``max_status_changes``: flips allowed per check valve or pump before its
      status is frozen (guard against cycling; a frozen status that contradicts the final heads or
      flows raises ``ConvergenceError``).
    - ``viscosity`` [m2/s] for Darcy-Weisbach; ``dense=True`` factors densely (checks only).
    - ``reuse_factor``: solve an iteration's system by conjugate gradients preconditioned with the
      last factorization when at most ``reuse_max_changed`` links changed 1/D by more than a factor
      2 since it was made; fall back to a new factorization when CG needs more than
      ``cg_max_iterations`` steps. The step is then as exact as the mass tolerance asks. With
      CHOLMOD the links whose 1/D changed by more than ``update_ratio`` are first updated into the
      kept factor (low-rank updates) when that costs at most ``update_budget`` of a factorization,
      so far more of the iterations near the solution need no new factorization (``_reuse``).
    """

    def __init__(self, network, headloss: str = "hazen-williams", *, q_eps: float = hl.HW_Q_EPS,
                 max_iterations: int = 100, flow_tol: float = 1e-8, head_tol: float = 1e-6,
                 energy_tol: float = 1e-6, mass_tol: float = 1e-8, mass_tol_abs: float = 1e-9,
                 max_status_changes: int = 8, viscosity: float = hl.NU_WATER_60F,
                 dense: bool = False, reuse_factor: bool = True, reuse_max_changed: int = 20,
                 cg_max_iterations: int = 25, update_ratio: float = 2.0,
                 update_budget: float = 0.25, head_step: bool = True):
        if headloss not in HEADLOSS_MODELS:
            raise InputError(f"unknown head-loss model '{headloss}'", field="headloss",
                             expected=" or ".join(HEADLOSS_MODELS))
        self.network = net = network
        self.headloss = headloss
        self.q_eps = float(q_eps)
        self.max_iterations = int(max_iterations)
        self.flow_tol, self.head_tol, self.energy_tol = flow_tol, head_tol, energy_tol
        self.head_step = bool(head_step)
        self.mass_tol, self.mass_tol_abs = mass_tol, mass_tol_abs
        self.max_status_changes = int(max_status_changes)
        self.viscosity = float(viscosity)
        self.reuse_factor = reuse_factor and not dense
        self._reach_cache = Memo()
        #: a stack of copies (``stacked.StackedNetwork``) whose every copy meeting its own
        #: tolerances also ends the iteration (``settled``); None for one network
        self.copies = None
        self._factor = None
        #: factorizations kept beside solutions: result key -> _KeptFactor (least recently used
        #: first). A warm start from a solution starts from its factor; the sensitivities at a
        #: solution solve with it (``sensitivity.sensitivities``).
        self._kept: OrderedDict = OrderedDict()
        self._matrix = None  # S of the last iteration; its values are replaced each iteration
        self._rough_memo = None  # (roughness bytes, roughness, law coefficient) of the last solve
        self.reuse_max_changed, self.cg_max_iterations = reuse_max_changed, cg_max_iterations
        self.update_ratio, self.update_budget = float(update_ratio), float(update_budget)
        self.nj, self.np_, self.nu = net.n_junctions, net.n_pipes, len(net.pumps)
        self.nv = len(net.valves)  # valves: links after the pumps
        self.link_from = np.concatenate([net.pipe_from, np.asarray(net.pumps.from_node, np.int64),
                                         net.valves.from_node])
        self.link_to = np.concatenate([net.pipe_to, np.asarray(net.pumps.to_node, np.int64),
                                       net.valves.to_node])
        self.link_ids = np.concatenate([net.pipe_ids, np.asarray(net.pumps.ids, dtype=object),
                                        net.valves.ids])
        self.valves = ValveLinks(net, self.np_ + self.nu, self.q_eps, self.max_status_changes)
        checks.check_geometry(net, self.link_from, self.link_to)
        if headloss == "darcy-weisbach":
            checks.check_roughness_height(net, net.roughness_height)
        self.pattern = SchurPattern(self.nj, self.link_from, self.link_to, net.n_nodes, dense=dense)
        self.area = np.pi * net.diameter ** 2 / 4.0
        self.minor = hl.minor_loss_coefficient(net.minor_loss, net.diameter)
        self._minor_at = np.flatnonzero(self.minor)
        self._has_minor = bool(self._minor_at.size)
        self.is_cv = net.status == PipeStatus.CHECK_VALVE
        self.pipe_closed = net.status == PipeStatus.CLOSED
        pumps = net.pumps
        self.speed = np.asarray(pumps.speed, dtype=float)
        self.pump_h0 = np.asarray(pumps.shutoff_head, dtype=float)
        self.pump_r = np.asarray(pumps.curve_r, dtype=float)
        self.pump_n = np.asarray(pumps.curve_n, dtype=float)
        self._graph_rows = np.concatenate([self.link_from, self.link_to])
        self._graph_cols = np.concatenate([self.link_to, self.link_from])

    # --- the link laws -----------------------------------------------------------------------
    def _laws(self, q, coef):
        """Head loss h(Q) and slope dh/dQ of every link (pipes then pumps)."""
        np_, nu = self.np_, self.nu
        qp = q[:np_]
        if self.headloss == "hazen-williams":
            hp, gp = hl.hazen_williams_law(qp, coef, self.q_eps)
        else:
            hp, gp, _ = hl.darcy_weisbach_law(qp, self.network.length, self.network.diameter,
                                              coef, self.viscosity)
        if len(q) == np_:
            h, g = hp, gp
        else:  # pumps and valves after the pipes
            h, g = np.empty(len(q)), np.empty(len(q))
            h[:np_], g[:np_] = hp, gp
        if self._has_minor:  # only the pipes with fittings (usually few)
            k, m = self._minor_at, self.minor[self._minor_at]
            aq = np.abs(qp[k])
            h[k] += m * aq * qp[k]
            g[k] += 2.0 * m * aq
        if nu:
            h[np_:np_ + nu], g[np_:np_ + nu] = self._pump_law(q[np_:np_ + nu])
        if self.nv:  # valves
            h[np_ + nu:], g[np_ + nu:] = self.valves.law(q[np_ + nu:])
        return h, g

    def _pump_law(self, q):
        """Pump as a link with head loss ``-gain`` [m]; gain ``s^2 h0 - r s^(2-n) q^n`` for flow q
        [m3/s] at relative speed s: the curve ``h0 - r q^n`` moved by the affinity laws
        (q ~ s, h ~ s^2; e.g. Karassik et al., Pump Handbook, from memory). Continued linearly
        (value and slope) below q_eps so the slope stays positive."""
        s = np.where(self.speed > 0, self.speed, 1.0)
        n, r = self.pump_n, self.pump_r
        coef = r * s ** (2.0 - n)
        qe = self.q_eps
        qq = np.maximum(q, qe)
        gain = s ** 2 * self.pump_h0 - coef * qq ** n
        slope = np.maximum(n * coef * qq ** (n - 1.0), 1e-9)
        gain = np.where(q >= qe, gain, gain - slope * (q - qe))
        return -gain, slope

    def _initial_flow(self):
        q = np.concatenate([FT * self.area, np.zeros(self.nu),  # 1 ft/s from -> to
                            self.valves.initial_flow()])
        if self.nu:
            s = np.where(self.speed > 0, self.speed, 1.0)
            with np.errstate(divide="ignore", invalid="ignore"):
                q_half = s * (self.pump_h0 / (2.0 * self.pump_r)) ** (1.0 / self.pump_n)
            q[self.np_:self.np_ + self.nu] = np.where(np.isfinite(q_half) & (q_half > 0),
                                                      q_half, 1e-3)
        return q

    def _reachable(self, active):
        """Junctions joined to some source through active links -> (isolated junction mask).
        The last few answers are kept: most solves of a network share their set of active links."""
        key = active.tobytes()
        isolated = self._reach_cache.get(key)
        if isolated is None:
            isolated = self._reach_cache.put(key, self._components(active))
        return isolated

    def _isolated(self, active, vstate):
        """Junctions cut off from every source; with valves also those that only an active
        sustaining or flow-limiting valve joins to one (see ``valves.ValveLinks.cut_off``)."""
        isolated = self._reachable(active)
        return isolated | self.valves.cut_off(active, vstate) if self.nv else isolated

    def _components(self, active):
        net = self.network
        a = np.concatenate([active, active])
        g = sp.csr_matrix((np.ones(int(a.sum())), (self._graph_rows[a], self._graph_cols[a])),
                          shape=(net.n_nodes, net.n_nodes))
        _, labels = connected_components(g, directed=False)
        fed = np.zeros(labels.max() + 1, dtype=bool)
        fed[labels[self.nj:]] = True
        return ~fed[labels[: self.nj]]

    # --- solving -----------------------------------------------------------------------------
    def solve(self, snapshot: Snapshot | None = None, roughness=None, warm_start=None) -> SolveResult:
        """Solve one snapshot; ``roughness`` overrides the network's C (or DW height) per pipe;
        ``warm_start`` is a previous ``SolveResult`` (flows and statuses start from it)."""
        resolved = resolve(snapshot, self.network)
        # per-pipe coefficient of the law: HW resistance r, or DW roughness height; the last one
        # is kept, since a fit solves all its snapshots at one roughness in turn
        given = None if roughness is None else np.asarray(roughness, dtype=float)
        key = None if given is None else (given.shape, given.tobytes())
        if key is not None and self._rough_memo is not None and self._rough_memo[0] == key:
            rough, coef = self._rough_memo[1:]
        else:
            rough, coef = checks.roughness_parameters(self.network, self.headloss, roughness)
            if key is not None:  # private copies: the caller may change its array later
                same = coef is rough
                rough = rough.copy()
                coef = rough if same else coef
                self._rough_memo = (key, rough, coef)
        if warm_start is not None:
            q = warm_start.link_flow.astype(float).copy()
            active = warm_start._active.copy()
        else:
            q = self._initial_flow()
            active = np.ones(self.np_ + self.nu + self.nv, dtype=bool)
        fixed_closed = np.concatenate([self.pipe_closed, self.speed <= 0, self.valves.fixed_closed])
        # valves: their states start from the warm start's, else from their initial states
        given = getattr(warm_start, "_valve_state", None)
        self._vstate = given.copy() if given is not None else self.valves.initial_state()
        active[self.np_ + self.nu:] = self._vstate != VALVE_CLOSED
        self.valves.start()
        active &= ~fixed_closed
        q[~active] = 0.0
        self._start_factor(warm_start)
        result = self._iterate(resolved, rough, coef, q, active, fixed_closed,
                               secant=warm_start is None)
        self._keep(result)
        return result

    # --- factorizations kept beside solutions ------------------------------------------------
    def _keeps(self) -> bool:
        """True where factorizations are kept beside solutions: a factor is reused at all
        (``SchurPattern.reuse_pays``) and its size is known."""
        return (self.reuse_factor and self.pattern.reuse_pays and self.nj > 0
                and getattr(self.pattern._factorizer, "factor_nnz", None) is not None)

    def _capacity(self) -> int:
        nnz = self.pattern._factorizer.factor_nnz
        return int(max(1, min(KEPT_FACTORS, KEPT_FACTOR_BYTES // (12.0 * nnz + 8.0 * self.nj))))

    def _start_factor(self, warm) -> None:
        """The factorization a solve starts from: the one kept beside the warm start's solution
        (a fit solves each snapshot warm from its own last solution: its factor is the best
        preconditioner there is), else the last one made (a warm start from another loading, as
        before), else for a cold start memory to factor into (its values are not used)."""
        if not self._keeps():
            return  # the last factorization (``_iterate`` marks it stale for a cold start)
        entry = self._kept.get(getattr(warm, "_factor_key", None))
        if entry is not None:
            self._kept.move_to_end(warm._factor_key)
        elif warm is not None and self._kept:
            entry = next(reversed(self._kept.values()))
        else:
            entry = self._spare()
            if entry is not None:
                entry.stale = True
        self._factor = entry

    def _spare(self) -> _KeptFactor | None:
        """A kept factorization whose memory may be factored into: the least recently used one
        when the budget is full (dropped from every solution that keeps it), else None (allocate
        anew)."""
        if len({id(e) for e in self._kept.values()}) < self._capacity():
            return None
        oldest = next(iter(self._kept.values()))
        for key in [k for k, e in self._kept.items() if e is oldest]:
            del self._kept[key]
        oldest.shared = False
        return oldest

    def _trim(self) -> None:
        """Drop the least recently used factorizations past the budget (``_capacity`` distinct
        ones; at most four solutions per factorization kept)."""
        cap = self._capacity()
        while len(self._kept) > 4 * cap or len({id(e) for e in self._kept.values()}) > cap:
            self._kept.popitem(last=False)

    def _keep(self, result) -> None:
        """Keep the factorization the solve ended with beside ``result`` (``_factor_key``)."""
        if self._factor is None or not self._keeps():
            return
        key = next(_KEYS)
        self._factor.shared = True
        self._factor.stale = False
        self._kept[key] = self._factor
        result._factor_key = key
        self._trim()

    def kept_factor(self, result) -> _KeptFactor | None:
        """The factorization kept beside ``result`` (shared: not to be changed), or None."""
        return self._kept.get(getattr(result, "_factor_key", None))

    def keep_factor(self, result, factor, w, extra, fixed) -> None:
        """Keep ``factor`` (of the matrix with these weights) beside ``result``, in place of
        the one kept there."""
        if not self._keeps():
            return
        kept = _KeptFactor(factor, w, extra, fixed)
        kept.shared = True
        key = getattr(result, "_factor_key", None) or next(_KEYS)
        self._kept[key] = kept
        self._kept.move_to_end(key)
        result._factor_key = key
        self._trim()

    def solve_many(self, snapshots, roughness=None) -> list[SolveResult]:
        """Solve snapshots in turn, each warm-started from the last; pattern and ordering reused."""
        results, last = [], None
        for snap in snapshots:
            last = self.solve(snap, roughness=roughness, warm_start=last)
            results.append(last)
        return results

    def forget(self) -> None:
        """Drop what the last solves left for the next (the last factorization and those kept
        beside solutions, which a warm solve may reuse): the next solve then gives the numbers a
        fresh solver's would, whatever ran before (``calib.parallel``: a task gives the same
        answer in any process, in any order)."""
        self._factor = None
        self._kept.clear()

    def _iterate(self, resolved, rough, coef, q, active, fixed_closed, secant):
        net, nj, pat = self.network, self.nj, self.pattern
        f, t = self.link_from, self.link_to
        demand = resolved.demand
        H = np.empty(net.n_nodes)
        H[nj:] = resolved.source_head
        H[:nj] = resolved.source_head.max() if net.n_sources else 0.0
        total_demand = float(np.abs(demand).sum())
        mass_tol = max(self.mass_tol * total_demand, self.mass_tol_abs)
        dynamic = np.concatenate([self.is_cv, np.ones(self.nu, dtype=bool),
                                  np.zeros(self.nv, dtype=bool)]) & ~fixed_closed
        flips = np.zeros(len(q), dtype=np.int64)
        vstate, vflips, vheld = self._vstate, np.zeros(self.nv, np.int64), np.zeros(self.nv, bool)
        isolated, vstate, active, q = self._cut_off(active, vstate, q)
        self._check_isolated(isolated, demand)
        # held junctions (Snapshot.held_head) keep a fixed grade like a source: their mass equation
        # leaves the system (identity row, as for an isolated junction) and their draw is an output
        held = np.zeros(nj, dtype=bool)
        held[resolved.held] = True
        H[resolved.held] = resolved.held_head
        dq_max = dh_max = np.inf
        self.trace = []  # per iteration: (flow change / q_ref, head change, energy, mass error)
        changed = False
        dq = np.zeros(len(q))
        dH = np.zeros(nj)
        dHn = np.zeros(net.n_nodes)
        if secant and self._factor is not None:
            # cold start: the last solve's factor is not a preconditioner here (a warm start may
            # use it), only memory for the next factorization
            self._factor.stale = True
        self.factorizations = self.updates = 0
        for it in range(self.max_iterations + 1):
            h, grad = self._laws(q, coef)
            F1 = np.where(active, h - (H[f] - H[t]), 0.0)
            if self.nv:  # valves: active ones hold a grade or a flow
                F1 = self.valves.energy(F1, H, vstate)
            F2 = pat.inflow(q)[:nj] - demand
            F2[isolated | held] = 0.0
            e1 = float(np.abs(F1).max(initial=0.0))
            e2 = float(np.abs(F2).max(initial=0.0))
            q_ref = max(total_demand, float(np.abs(q).max(initial=0.0)), self.q_eps)
            self.trace.append((dq_max / q_ref, dh_max, e1, e2))
            if it > 0 and not changed and (
                    (dq_max <= self.flow_tol * q_ref
                     and (dh_max <= self.head_tol or not (self.head_step or self.nv))
                     and e1 <= self.energy_tol and e2 <= mass_tol)
                    or (self.copies is not None
                        and self.copies.settled(q, dq, dH, F1, F2, demand, self))):
                self._check_frozen(q, H, active, dynamic, flips)
                self._check_held(q, active, dynamic, demand)
                notes = (self.valves.check(q, H, vstate, vflips, vheld, demand, it)
                         if self.nv else [])
                result = self._result(resolved, rough, coef, q, H, h, grad, active, isolated,
                                      it, e1, e2, held)
                return annotate(self.valves, result, q, result.head, vstate, notes, active,
                                isolated)
            if it == self.max_iterations:
                break
            if it == 0 and secant:
                # first step with the secant slope h/Q of the pipes (a linear-resistance solve
                # around the starting flows): more robust far from the solution than Newton's
                # tangent; measured to save about a third of the iterations from a cold start
                qp = q[: self.np_]
                sec = np.abs(qp) > self.q_eps
                grad = grad.copy()
                grad[: self.np_][sec] = h[: self.np_][sec] / qp[sec]
            w = np.where(active, 1.0 / grad, 0.0)
            fixed = isolated | held
            extra = fixed.astype(float)
            if self.nv:  # valves: stiff one-sided links at the nodes active valves hold
                w, extra, rhs_v, w_s = self.valves.schur_terms(w, F1, vstate, extra)
            S = self._matrix = pat.assemble(w, extra, out=self._matrix)
            if held.any():
                pat.hold(S, fixed)
            rhs = F2 - pat.inflow(w * F1)[:nj]
            if self.nv:
                rhs += rhs_v
            rhs[fixed] = 0.0
            dH = (self._linear_solve(S, rhs, w, extra, fixed, mass_tol) if nj
                  else np.zeros(0))
            if self.nv and nj:  # valves: their flow changes at their far ends too
                dH = self.valves.couple(dH, F1, vstate, w_s, self._factor.factor, fixed,
                                        max(COUPLED_VALVES, (pat.work_ratio or 0.0) / 4.0),
                                        mass_tol, pat.blocks)
            dHn[:nj] = dH  # sources keep their grade: dH = 0 there
            dq = -w * (F1 - (dHn[f] - dHn[t]))
            if self.nv:
                dq = self.valves.flow_step(dq, dHn, F1, q, vstate, w_s)
            dq_max = float(np.abs(dq).max(initial=0.0))  # NaN or inf if any entry is
            dh_max = float(np.abs(dH).max(initial=0.0))
            if not (np.isfinite(dq_max) and np.isfinite(dh_max)):
                self._fail("the linear system broke down (non-finite step)", it + 1, F2, dH, dq,
                           e2)
            q = q + dq
            H[:nj] += dH
            changed = False
            if dynamic.any():
                changed, active, q, iso = self._update_status(q, H, active, dynamic, flips,
                                                              demand)
                if iso is not None:
                    isolated, vstate, active, q = self._cut_off(active, vstate, q)
                    self._check_isolated(isolated, demand)
            if self.nv and dq_max <= STATE_CHECK_FLOW * q_ref:  # valves: states near a solution
                vchanged, vstate, q, vhold = self.valves.update(q, H, vstate, vflips, demand,
                                                               settled=dh_max <= STATE_HEAD_TOL)
                vheld |= vhold
                if vchanged:
                    changed = True
                    active = active.copy()
                    active[self.np_ + self.nu:] = (vstate != VALVE_CLOSED) & \
                        ~fixed_closed[self.np_ + self.nu:]
                    isolated, vstate, active, q = self._cut_off(active, vstate, q)
                    self._check_isolated(isolated, demand)
        self._fail(f"no convergence in {self.max_iterations} iterations", self.max_iterations,
                   F2, dH, dq, e2)

    def _linear_solve(self, S, rhs, w, extra, fixed, mass_tol):
        """dH from S dH = rhs: with the last factorization where S changed little since it was made
        (``_reuse``), else by a new factorization, which is kept with the weights it was made of."""
        kept = self._factor
        if (self.reuse_factor and kept is not None and not kept.stale
                and np.array_equal(fixed, kept.fixed) and self.pattern.reuse_pays):
            dH = self._reuse(kept, S, rhs, w, extra, fixed, mass_tol)
            if dH is not None:
                return dH
        self._factor = None
        if kept is not None and kept.shared:
            kept = self._spare() if self._keeps() else None  # never into a kept one
        if kept is not None and kept.factor.refactor(S):  # into the kept factor's memory
            factor = kept.factor
        else:
            try:
                factor = self.pattern.factorize(S)
            except (RuntimeError, ValueError, np.linalg.LinAlgError) as exc:  # e.g. singular LU
                raise ConvergenceError(
                    f"network '{self.network.name}': the linear system is singular ({exc}); a pipe "
                    "of extreme diameter, length or C is the usual cause") from None
        self.factorizations += 1
        self._factor = _KeptFactor(factor, w.copy(), extra.copy(), fixed.copy())
        return factor(rhs)

    def _reuse(self, kept, S, rhs, w, extra, fixed, mass_tol):
        """Solve with the kept factorization, or None when that would cost more than a new one.

        Each link whose 1/D changed since the factor was made is a rank-one change of S. When at
        most ``reuse_max_changed`` links changed by more than a factor 2, conjugate gradients
        preconditioned with the factor absorb them (about one step each). With more, or when CG
        stops early, where the factor can be updated in place (CHOLMOD), the links changed by more
        than ``update_ratio`` (and changed extra diagonal terms) are first updated into it when
        that costs at most ``update_budget`` of a factorization (``SchurPattern.update_work``);
        CG then absorbs the smaller changes in a few steps.
        CG is stopped past the cost of about one factorization (2.5 x the flop ratio, measured on
        grids of 1k-50k pipes where Python overhead weighs on CG steps)."""
        pat, factor = self.pattern, kept.factor
        cap = min(self.cg_max_iterations, int(2.5 * (pat.work_ratio or 0.0)))
        if cap < 1:
            return None
        tol = (CG_MASS_FRACTION_VALVES if self.nv else CG_MASS_FRACTION) * mass_tol
        far = (w > 2.0 * kept.w) | (w < 0.5 * kept.w)
        if np.count_nonzero(far) <= self.reuse_max_changed:
            dH = pat.pcg(S, factor, rhs, tol, cap)
            if dH is not None or not factor.can_update:
                return dH
        elif not factor.can_update:
            return None
        rho = self.update_ratio
        links = np.flatnonzero((w > rho * kept.w) | (rho * w < kept.w))
        nodes = np.flatnonzero((extra != kept.extra) & ~fixed)
        if not (len(links) or len(nodes)) or pat.update_work(links, nodes) > self.update_budget:
            return None  # nothing to update (CG failed on the small changes) or too costly
        up, down = pat.low_rank(links, w[links] - kept.w[links], nodes,
                                extra[nodes] - kept.extra[nodes], fixed)
        if kept.shared:  # kept beside a solution too: change a copy
            kept = self._factor = kept.own()
            factor = kept.factor
        if not factor.update(up, down):
            self._factor = None  # rounding made a pivot <= 0: factor anew
            return None
        kept.w[links] = w[links]
        kept.extra[nodes] = extra[nodes]
        self.updates += 1
        return pat.pcg(S, factor, rhs, tol, cap)

    def _update_status(self, q, H, active, dynamic, flips, demand):
        """Check valves close on reverse flow and reopen when the head would drive forward flow;
        pumps stop on reverse flow and restart when the lift needed is below their shutoff head.

        A closing that would cut junctions with demand off every source is held back (a Newton
        step can reverse a flow on its way); if the flow stays reversed at the solution,
        ``_check_held`` says so. Returns (changed, active, q, isolated)."""
        d = np.flatnonzero(dynamic)  # usually few: look at them alone first
        steady = flips[d] >= self.max_status_changes
        if not ((active[d] & (q[d] < 0.0)) | ~active[d])[~steady].any():
            return False, active, q, None  # none can close, none is closed: nothing to change
        np_ = self.np_
        f, t = self.link_from, self.link_to
        frozen = flips >= self.max_status_changes
        lift = H[t] - H[f]
        can_close = dynamic & active & (q < 0.0) & ~frozen
        reopen = np.zeros(len(q), dtype=bool)
        reopen[:np_] = self.is_cv & (-lift[:np_] > self.head_tol)
        if self.nu:
            s = self.speed
            reopen[np_:] = lift[np_:] < s ** 2 * self.pump_h0 - self.head_tol
        can_open = dynamic & ~active & reopen & ~frozen
        new = active.copy()
        new[can_close] = False
        new[can_open] = True
        isolated = self._reachable(new) if (can_close.any() or can_open.any()) else None
        if isolated is not None and can_close.any() and (isolated & (demand != 0)).any():
            new[can_close] = True  # hold them open this step
            can_close[:] = False
            isolated = self._reachable(new) if can_open.any() else None
        changed = bool(can_close.any() or can_open.any())
        if changed:
            q = q.copy()
            q[can_close] = 0.0
            q[can_open] = self._initial_flow()[can_open]
            flips[can_close | can_open] += 1
        return changed, new, q, isolated

    def _check_held(self, q, active, dynamic, demand):
        """At the solution no open check valve or running pump may carry reverse flow: one that
        does was held open because closing it cuts off junctions with demand."""
        bad = dynamic & active & (q < -self.q_eps)
        if bad.any():
            cut = self._reachable(active & ~bad) & (np.abs(demand) > 0)
            links = checks.shown_ids(self.link_ids[bad])
            nodes = checks.shown_ids(self.network.node_ids[: self.nj][cut])
            raise NetworkError(Problem(
                f"check valve(s) or pump(s) {links} would close against the flow and cut "
                f"junction(s) {nodes} with demand off every fixed-grade source",
                field="status", expected="check valves pointing from the source side, or an "
                "other open path to those junctions"))

    def _check_frozen(self, q, H, active, dynamic, flips):
        frozen = dynamic & (flips >= self.max_status_changes)
        if not frozen.any():
            return
        f, t = self.link_from, self.link_to
        bad = frozen & ((active & (q < -self.q_eps)) | (~active & (H[f] - H[t] > self.head_tol)))
        if bad.any():
            ids = [str(i) for i in self.link_ids[bad][:10]]
            raise ConvergenceError(
                f"check valve / pump status kept flipping and was frozen inconsistent with the "
                f"solution at link(s) {', '.join(ids)}; check their direction and settings",
                iterations=int(flips.max()), worst_links=ids)

    def _cut_off(self, active, vstate, q):
        """Junctions cut off from every source (``_isolated``) -> (isolated, vstate, active, q).
        A control valve whose inlet junction is cut off carries nothing: it is closed for this
        solve and kept closed (``ValveLinks.shut``). Left active, a reducing valve would feed its
        outlet from the dead inlet's stale grade: water made from nothing, since the dead
        junction's mass balance is out of the system."""
        isolated = self._isolated(active, vstate)
        if not self.nv:
            return isolated, vstate, active, q
        v, s = self.valves, slice(self.np_ + self.nu, self.np_ + self.nu + self.nv)
        inlet = v.frm < self.nj
        for _ in range(self.nv):  # closing one may cut off the inlet of another
            shut = np.zeros(self.nv, dtype=bool)
            shut[inlet] = isolated[v.frm[inlet]]
            v.shut = shut
            dead = shut & (vstate != VALVE_CLOSED)
            if not dead.any():
                break
            vstate, active, q = vstate.copy(), active.copy(), q.copy()
            vstate[dead] = VALVE_CLOSED
            active[s] &= ~dead
            q[s][dead] = 0.0
            isolated = self._isolated(active, vstate)
        return isolated, vstate, active, q

    def _check_isolated(self, isolated, demand):
        bad = isolated & (np.abs(demand) > 0)
        if bad.any():
            shown = checks.shown_ids(self.network.node_ids[: self.nj][bad])
            raise NetworkError(Problem(
                f"junction(s) {shown} have a demand but are cut off from every fixed-grade source "
                f"by closed pipes, closed check valves or idle pumps", field="status",
                expected="an open path from each junction with demand to a reservoir or tank"))

    def _fail(self, why, iterations, F2, dH, dq, e2):
        net = self.network
        mass_bad = np.abs(F2) > max(self.mass_tol_abs, 0.0)
        node_key = np.abs(F2) if mass_bad.any() else np.abs(np.nan_to_num(dH, nan=np.inf))
        worst_nodes = [str(net.node_ids[i]) for i in np.argsort(-node_key)[:5]]
        worst_links = [str(self.link_ids[i])
                       for i in np.argsort(-np.abs(np.nan_to_num(dq, nan=np.inf)))[:5]]
        raise ConvergenceError(
            f"network '{net.name}': {why}; largest mass-balance error {e2:.3g} m3/s; "
            f"worst nodes {', '.join(worst_nodes)}; largest flow changes at links "
            f"{', '.join(worst_links)}. Check closed valves, pump curves and very small or very "
            f"long pipes there", iterations=iterations, worst_nodes=worst_nodes,
            worst_links=worst_links, max_mass_error=e2)

    def _result(self, resolved, rough, coef, q, H, h, grad, active, isolated, it, e1, e2,
                held=None):
        net, nj, np_ = self.network, self.nj, self.np_
        H = H.copy()
        H[:nj][isolated] = net.elevation[:nj][isolated]
        pressure = GAMMA_WATER * (H - net.elevation)
        flow = q[:np_].copy()
        flow[~active[:np_]] = 0.0
        pump_flow = q[np_:np_ + self.nu].copy()
        pump_flow[~active[np_:np_ + self.nu]] = 0.0
        headloss = np.where(active[:np_], h[:np_], 0.0)
        neg = np.flatnonzero((pressure[:nj] < 0) & ~isolated)
        return SolveResult(
            head=H, pressure=pressure, flow=flow, pump_flow=pump_flow,
            velocity=flow / self.area, headloss=headloss, iterations=it,
            factorizations=self.factorizations,
            max_mass_error=e2, max_energy_error=e1, converged=True,
            negative_pressure=list(map(str, net.node_ids[neg])),
            isolated=list(map(str, net.node_ids[:nj][isolated])),
            closed_links=list(map(str, self.link_ids[~active])),
            snapshot=resolved.snapshot, roughness=rough, _grad=grad, _active=active.copy(),
            **{"_isolated_mask": isolated.copy(), **self._held_fields(resolved, q, held, isolated)})

    def _held_fields(self, resolved, q, held, isolated) -> dict:
        """Draw at each held junction (inflow minus its own demand) [m3/s]; held junctions count as
        fixed in ``_isolated_mask`` so that ``sensitivities`` keeps their grade fixed too."""
        if held is None or not held.any():
            return {}
        draw = self.pattern.inflow(q)[resolved.held] - resolved.demand[resolved.held]
        return {"held_flow": dict(zip(self.network.node_ids[resolved.held].astype(str), draw)),
                "_isolated_mask": isolated | held}

    # --- derivatives at a solution (see ``calib.hydraulics.sensitivity``) ---------------------
    def sensitivities(self, result: SolveResult, dF1_dp, dF2_dp):
        """Implicit differentiation at a converged snapshot: ``(dH, dQ)`` for p parameters.

        Solves ``[[D, A12], [A21, 0]] [dQ; dH] = -[dF1/dp; dF2/dp]`` at the solution, one
        factorization for all p columns; see ``calib.hydraulics.sensitivity.sensitivities``.
        """
        return sensitivity.sensitivities(self, result, dF1_dp, dF2_dp)

    def dheadloss_droughness(self, result: SolveResult) -> np.ndarray:
        """Derivative of each pipe's head loss with respect to its own roughness parameter
        (Hazen-Williams: ``-1.852 hf_k / C_k``); see ``calib.hydraulics.sensitivity``."""
        return sensitivity.dheadloss_droughness(self, result)
