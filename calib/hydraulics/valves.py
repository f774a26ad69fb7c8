"""Control valves inside the global gradient method: pressure-reducing, pressure-sustaining,
flow-limiting and throttle valves, their states and the pressure zones they make.

Treatment: status switching in the gradient method of Todini and Pilati (1988) - each valve is a
link in one of three states, and between Newton steps a state whose conditions no longer hold is
changed, as for check valves. In its states:

- open: a fully open valve, ``h = K V^2/2g`` with its ``minor_loss`` K (``headloss.
  minor_loss_coefficient``) plus a tiny linear term ``R_LINEAR Q`` [m per m3/s] that keeps the slope
  dh/dQ above zero at no flow (1e-4 m per m3/s: 3e-6 ft at 500 gpm); flow both ways is
  possible but a reverse flow closes the valve (below);
- closed: no flow, the link leaves the equations;
- active: a reducing valve holds the grade of its downstream node at ``H_set = z_to + p_set /
  gamma``, a sustaining valve that of its upstream node (``z_from + p_set / gamma``), a
  flow-limiting valve passes exactly its setting. A throttle is always "active": a link with loss
  ``K V^2/2g``, K its setting.

An active pressure valve is, for the side it controls, a link from a fixed grade to that node,
``F1 = r_s Q - (H_s - H_node)``, whose fixed grade ``H_s = H_set + r_s Q_last`` moves with the last
flow (a proximal term), so that ``F1 = H_node - H_set`` exactly and the node's grade is the setting
at convergence, whatever the stiffness ``w_s = 1/r_s``. The other side sees the valve's flow of
the last iterate as a demand (reducing valve: at ``from``) or a supply (sustaining: at ``to``);
that lag costs an iteration or two and keeps the Schur complement symmetric positive definite, so
the factorization and the preconditioned conjugate gradients of the solver stay as they are. An
active flow-limiting valve is a fixed flow seen by both ends. The same system with the lag
iterated to its fixed point gives the sensitivities (``sensitivities``).

State rules (h_o the open valve's loss at the current flow, tolerance ``STATE_HEAD_TOL``):

- reducing: active -> closed on reverse flow, -> open when ``H_from - H_set < h_o``;
  open -> closed on reverse flow, -> active when ``H_to > H_set``;
  closed -> active when ``H_to < H_set`` and ``H_from > H_set``, -> open when
  ``H_to < H_from <= H_set``.
- sustaining: active -> closed on reverse flow, -> open when ``H_set - H_to < h_o``;
  open -> closed on reverse flow, -> active when ``H_from < H_set``;
  closed -> active when ``H_from > H_set`` and ``H_from > H_to``.
- flow-limiting: open -> active when ``Q > Q_set``, -> closed on reverse flow;
  active -> open when ``H_from - H_to < h_o(Q_set)``; closed -> open when ``H_from > H_to``.

A change that would leave junctions with demand without any feed (through the coupled links) is
held back that step; a valve whose state flipped ``max_status_changes`` times is frozen. At the
end every valve's state is checked against the rules: a held or frozen valve that contradicts the
solution raises (``NetworkError`` naming the junctions it would cut off, ``ConvergenceError``
naming the frozen valves) - a result never holds a valve past its setting or a reverse flow
through a pressure or flow valve. Frozen valves that agree with the solution are named in
``SolveResult.valve_notes``.

Status switching for pressure-regulating valves in the gradient method is the approach of
Salgado, Todini and O'Connell (1988), "Extending the gradient method to include pressure
regulating valves in pipe networks", Proc. Int. Symp. on Computer Modelling of Water Distribution
Systems, Univ. of Kentucky (from memory, not checked against the paper; the stiff proximal link
above is this module's own). Piller and van Zyl (2014), J. Hydraul. Eng. 140(11), give a
continuous-state alternative, not used here.

Zones: the junctions joined to a source, or to the controlled side of an active pressure or flow
valve, through links that are neither closed nor active control valves
(``scipy.sparse.csgraph.connected_components``). Not here: the iteration itself (``solver``).
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from calib.errors import ConvergenceError, NetworkError, Problem
from calib.hydraulics import headloss as hl
from calib.hydraulics.memo import Memo
from calib.network.model import PipeStatus, ValveMode, ValveType
from calib.units import GAMMA_WATER

ACTIVE, OPEN, CLOSED = int(ValveMode.ACTIVE), int(ValveMode.OPEN), int(ValveMode.CLOSED)
STATE_WORDS = np.array(["active", "open", "closed"], dtype=object)
PRV, PSV, FCV, TCV = (int(ValveType.REDUCING), int(ValveType.SUSTAINING),
                      int(ValveType.FLOW_LIMITING), int(ValveType.THROTTLE))
#: Linear resistance added to every open valve [m per m3/s]: keeps dh/dQ > 0 at no flow.
R_LINEAR = 1e-4
#: Stiffness of an active pressure valve's link, relative to the links at its node [-].
STIFFNESS = 1e3
#: Head tolerance of the state rules [m] (3e-4 ft): a valve within it of its setting keeps its state.
STATE_HEAD_TOL = 1e-4
#: States are checked only once the last step changed flows by at most this share of the
#: reference flow; a valve that changed state before changes again only once the last step also
#: changed heads by at most ``STATE_HEAD_TOL`` (judged on rough heads, a valve whose loss is
#: small flips back and forth) - except to close against a reverse flow, always allowed.
STATE_CHECK_FLOW = 0.05


class ValveLinks:
    """The valves of one network as links ``offset .. offset + n - 1`` of the solver."""

    def __init__(self, network, offset: int, q_eps: float, max_status_changes: int):
        v = network.valves
        self.n = n = len(v)
        self.network = network
        self.offset = offset
        self.q_eps = q_eps
        self.max_status_changes = max_status_changes
        self.ids = np.asarray(v.ids, dtype=object)
        self.frm, self.to = np.asarray(v.from_node), np.asarray(v.to_node)
        self.kind, self.mode = np.asarray(v.kind, dtype=int), np.asarray(v.mode, dtype=int)
        self.area = np.pi * v.diameter ** 2 / 4.0
        throttling = (self.kind == TCV) & (self.mode == ACTIVE)
        k = np.where(throttling, np.nan_to_num(v.setting), v.minor_loss)
        self.k_law = hl.minor_loss_coefficient(k, v.diameter) if n else np.zeros(0)
        self.k_open = hl.minor_loss_coefficient(v.minor_loss, v.diameter) if n else np.zeros(0)
        elev = network.elevation
        grade = np.where(self.kind == PSV, elev[self.frm], elev[self.to]) + v.setting / GAMMA_WATER
        self.h_set = np.where(np.isin(self.kind, (PRV, PSV)), grade, np.nan)
        self.q_set = np.where(self.kind == FCV, v.setting, np.nan)
        #: valves whose state the solver finds (the others keep the one of their mode)
        self.auto = (self.mode == ACTIVE) & (self.kind != TCV)
        self.pressure_valve = np.isin(self.kind, (PRV, PSV))
        # the steered valves of each kind, and whether there are any (most networks have one
        # or two kinds: the state rules of the others are skipped)
        self._prv, self._psv = self.auto & (self.kind == PRV), self.auto & (self.kind == PSV)
        self._fcv = self.auto & (self.kind == FCV)
        self._kinds = (self._prv.any(), self._psv.any(), self._fcv.any())
        self._sign = np.where(self.kind == PSV, 1.0, -1.0)  # rhs = F2 - A21 (w F1), controlled end
        # the end a pressure valve does not control, and the A21 entry there (-1 at from, +1 at to)
        self._far = np.where(self.kind == PSV, self.to, self.frm)
        self._far_sign = np.where(self.kind == PSV, 1.0, -1.0)
        self.fixed_closed = self.mode == CLOSED
        nj = network.n_junctions
        self.nj = nj
        ctrl = np.where(self.kind == PSV, self.frm, self.to)
        self.ctrl = ctrl
        # links at each valve's controlled node (for the stiffness), built once
        f_all, t_all = self._all_links(network)
        ends = np.concatenate([f_all, t_all])
        link = np.concatenate([np.arange(len(f_all)), np.arange(len(f_all))])
        order = np.argsort(ends, kind="stable")
        starts = np.searchsorted(ends[order], ctrl)
        stops = np.searchsorted(ends[order], ctrl, side="right")
        self._near_owner = np.repeat(np.arange(n), stops - starts)
        self._near_link = (link[order][np.concatenate([np.arange(a, b) for a, b in
                                                       zip(starts, stops)])]
                           if n else np.zeros(0, dtype=np.int64)).astype(np.int64)
        self._cut_cache = Memo()
        self._zone_cache = Memo()
        #: valves whose inlet is cut off from every source: closed whatever the rules say (set by
        #: the solver, ``NetworkSolver._cut_off``)
        self.shut = np.zeros(n, dtype=bool)
        self.start()

    def _all_links(self, net):
        f = np.concatenate([net.pipe_from, np.asarray(net.pumps.from_node, np.int64), self.frm])
        t = np.concatenate([net.pipe_to, np.asarray(net.pumps.to_node, np.int64), self.to])
        return f, t

    # --- states --------------------------------------------------------------------------------
    def start(self) -> None:
        """Forget the stiffness of the last solve (called at the start of each solve)."""
        self._w_s = np.full(self.n, np.nan)

    def initial_state(self) -> np.ndarray:
        """Reducing valves start active (they usually are), sustaining and flow-limiting open;
        valves held by their mode keep it; throttles are active."""
        state = np.where(self.mode == CLOSED, CLOSED, OPEN)
        state[(self.kind == PRV) & self.auto] = ACTIVE
        state[(self.kind == TCV) & (self.mode == ACTIVE)] = ACTIVE
        return state.astype(int)

    def initial_flow(self) -> np.ndarray:
        """1 ft/s from -> to, a flow-limiting valve at most its setting."""
        q = 0.3048 * self.area
        return np.where(self.kind == FCV, np.fmin(q, self.q_set), q)

    def slots(self) -> slice:
        return slice(self.offset, self.offset + self.n)

    # --- the link law and the Newton system ---------------------------------------------------
    def law(self, q):
        """Head loss and slope of the valves as open links (throttles with their setting K)."""
        aq = np.abs(q)
        return self.k_law * aq * q + R_LINEAR * q, 2.0 * self.k_law * aq + R_LINEAR

    def energy(self, F1, H, state):
        """Replace the energy residual of active valves: ``H_node - H_set`` (reducing),
        ``H_set - H_from`` (sustaining), 0 (flow-limiting, its flow is fixed)."""
        s = self.slots()
        act = (state == ACTIVE) & self.auto
        if not act.any():
            return F1
        F1 = F1.copy()
        r = F1[s]
        r = np.where(act & self._prv, H[self.to] - self.h_set, r)
        r = np.where(act & self._psv, self.h_set - H[self.frm], r)
        r = np.where(act & self._fcv, 0.0, r)
        F1[s] = r
        return F1

    def schur_terms(self, w, F1, state, extra_diag):
        """Zero the weights of active valves and return (w, extra diagonal, rhs term, w_s):
        the stiff one-sided link at each controlled node."""
        s = self.slots()
        act = (state == ACTIVE) & self.auto
        w = w.copy()
        extra = extra_diag.copy()
        rhs = np.zeros(self.nj)
        if not act.any():
            return w, extra, rhs, np.zeros(self.n)
        w[s] = np.where(act, 0.0, w[s])
        near = np.bincount(self._near_owner, weights=w[self._near_link], minlength=self.n)
        # the stiffness of each valve is kept from its first use in a solve: a fixed diagonal
        # lets the solver precondition later steps with an older factorization
        fresh = ~np.isfinite(self._w_s)
        self._w_s[fresh] = STIFFNESS * np.maximum(near[fresh], 1e-12)
        w_s = self._w_s
        press = act & self.pressure_valve
        sign = self._sign
        node = self.ctrl[press]
        extra += np.bincount(node, weights=w_s[press], minlength=len(extra))[: len(extra)]
        rhs += np.bincount(node, weights=(sign * w_s * F1[s])[press],
                           minlength=self.nj)[: self.nj]
        return w, extra, rhs, np.where(press, w_s, 0.0)

    def flow_step(self, dq, dHn, F1, q, state, w_s):
        """The flow change of active valves: through the stiff link, or to the setting."""
        s = self.slots()
        act = (state == ACTIVE) & self.auto
        if not act.any():
            return dq
        d = dq[s]
        d = np.where(act & self._prv, -w_s * (F1[s] + dHn[self.to]), d)
        d = np.where(act & self._psv, -w_s * (F1[s] - dHn[self.frm]), d)
        d = np.where(act & self._fcv, self.q_set - q[s], d)
        dq[s] = d
        return dq

    def couple(self, dH, F1, state, w_s, solve, fixed, max_valves, tol, blocks=None):
        """The Newton step with each active pressure valve's flow change seen at its far end too.

        ``dH`` solves the system in which the far end (a reducing valve's inlet, a sustaining
        valve's outlet) sees the valve's flow of the last iterate; the step then leaves a mass
        error there of the valve's flow change, which the next iteration corrects - a lag that
        converges linearly (measured: about 0.08 per iteration on the demo town). The exact step
        is ``dH + Y c``: ``Y = S^-1 L`` with L the unit flow change of each such valve at its far
        end, and ``c`` the valves' flow changes, found from the k x k system that makes them the
        flow changes ``flow_step`` gives for the corrected grades (``dq_v = a + B dH``; one
        solve with k columns and the factor the step used, exact when it is S's own factor,
        a close one when the step reused an older one). S stays symmetric: only the step changes.
        Only with at most ``max_valves`` columns: each costs a solve per iteration, and on the
        50k-pipe benchmark grid with 38 such valves the iterations took 2.7x as long and were not
        fewer (25 -> 28); the lag is kept there. Nor where the valves' flow changes are at most
        ``tol`` [m3/s] (the mass tolerance): the lag then leaves no error that counts.
        ``blocks``: the label of each junction's part of S (disjoint networks, e.g. the copies of
        a stacked network). Valves in different parts share a column, since a unit change in one
        part moves no grade in another (Curtis, Powell and Reid (1974), J. Inst. Maths Applics
        13, for the same grouping of Jacobian columns): the columns are as many as the most
        such valves in one part.
        """
        act = (state == ACTIVE) & self.auto
        far = self._far
        lag = act & self.pressure_valve & (far < self.nj) & (self.ctrl < self.nj)
        lag[lag] = ~fixed[far[lag]] & ~fixed[self.ctrl[lag]]
        idx = np.flatnonzero(lag)
        k = idx.size
        if k == 0:
            return dH
        part = np.zeros(self.nj, dtype=np.int64) if blocks is None else blocks
        vpart = part[far[idx]]
        # column of each valve: its rank among the valves of its part
        order = np.argsort(vpart, kind="stable")
        col = np.empty(k, dtype=np.int64)
        col[order] = np.arange(k) - np.searchsorted(vpart[order], vpart[order])
        n_col = int(col.max()) + 1
        if n_col > max_valves:
            return dH
        # dq_v = -w_s (F1_v + sigma dH_ctrl), sigma = +1 (reducing: its outlet) or -1
        # (sustaining: its inlet), as in ``flow_step``
        ws_sigma = w_s[idx] * -self._sign[idx]
        ctrl = self.ctrl[idx]
        rhs = -w_s[idx] * F1[self.slots()][idx] - ws_sigma * dH[ctrl]
        if np.abs(rhs).max() <= tol:
            return dH
        unit = np.zeros((self.nj, n_col))
        unit[far[idx], col] = self._far_sign[idx]
        Yc = solve(unit).reshape(self.nj, n_col)
        # Y[n, j] = Yc[n, col_j] in valve j's part, 0 elsewhere
        Y_ctrl = Yc[ctrl][:, col] * (part[ctrl][:, None] == vpart[None, :])
        c = np.linalg.solve(np.eye(k) + ws_sigma[:, None] * Y_ctrl, rhs)
        if n_col == k and blocks is None:
            return dH + Yc @ c
        by_part = np.zeros((n_col, int(part.max()) + 1))
        by_part[col, vpart] = c
        return dH + (Yc * by_part[:, part].T).sum(axis=1)

    def _wanted(self, q, H, state):
        """The state each valve's rules ask for at (q, H), for the valves the solver steers."""
        tol = STATE_HEAD_TOL
        hf, ht = H[self.frm], H[self.to]
        h_open = self.k_open * np.abs(q) * q + R_LINEAR * q
        rev = q < -self.q_eps
        new = state.copy()
        hs = self.h_set
        is_a, is_o, is_c = state == ACTIVE, state == OPEN, state == CLOSED
        has_prv, has_psv, has_fcv = self._kinds
        if has_prv:  # reducing
            prv = self._prv
            a, o, c = prv & is_a, prv & is_o, prv & is_c
            new[a & (hf - hs < h_open - tol)] = OPEN
            new[o & (ht > hs + tol)] = ACTIVE
            new[(a | o) & rev] = CLOSED
            new[c & (ht < hs - tol) & (hf > hs + tol)] = ACTIVE
            new[c & (ht < hf - tol) & (hf <= hs + tol)] = OPEN
        if has_psv:  # sustaining
            psv = self._psv
            a, o, c = psv & is_a, psv & is_o, psv & is_c
            new[a & (hs - ht < h_open - tol)] = OPEN
            new[o & (hf < hs - tol)] = ACTIVE
            new[(a | o) & rev] = CLOSED
            new[c & (hf > hs + tol) & (hf > ht + tol)] = ACTIVE
        if has_fcv:  # flow-limiting
            fcv = self._fcv
            qs = self.q_set
            a, o, c = fcv & is_a, fcv & is_o, fcv & is_c
            h_at_set = self.k_open * np.abs(qs) * qs + R_LINEAR * qs
            new[o & (q > qs * (1 + 1e-9) + self.q_eps)] = ACTIVE
            new[o & rev] = CLOSED
            new[a & (hf - ht < h_at_set - tol)] = OPEN
            new[c & (hf > ht + tol)] = OPEN
        new[self.shut] = CLOSED  # a dead inlet feeds nothing
        return new

    def update(self, q, H, state, flips, demand, settled=True):
        """Change the states the rules ask for (not frozen ones, not those that would cut off
        junctions with demand, and a valve that changed before only on ``settled`` heads).
        Returns (changed, state, q, held mask)."""
        s = self.slots()
        qv = q[s]
        frozen = flips >= self.max_status_changes
        new = self._wanted(qv, H, state)
        if not settled:  # a valve that changed before waits for settled heads, unless it closes
            # against a reverse flow (an active valve holding a grade against it runs away)
            frozen = frozen | ((flips > 0) & ~((new == CLOSED) & (qv < -self.q_eps)))
        new[frozen] = state[frozen]
        change = new != state
        held = np.zeros(self.n, dtype=bool)
        if not change.any():
            return False, state, q, held
        cuts = self._cuts(new, demand)
        if cuts.any():
            # hold back the changes that cut: those to closed, and active sustaining or
            # flow-limiting valves (they feed their far side with a flow, not a grade)
            risky = change & ((new == CLOSED) | ((new == ACTIVE) & (self.kind != PRV)))
            new[risky] = state[risky]
            held = risky
            change = new != state
            if not change.any():
                return False, state, q, held
        q = q.copy()
        qv = q[s]
        qv[change & (new == CLOSED)] = 0.0
        to_fcv = change & (new == ACTIVE) & (self.kind == FCV)
        qv[to_fcv] = self.q_set[to_fcv]
        reopened = change & (state == CLOSED)
        qv[reopened] = self.initial_flow()[reopened]
        q[s] = qv
        flips[change] += 1
        return True, new, q, held

    def _coupled_graph(self, state, link_active):
        """Links that carry a head coupling (not closed, not active control valves) plus a
        virtual link from each active pressure valve's controlled node to the first source."""
        net = self.network
        f, t = self._all_links(net)
        act_valve = (state == ACTIVE) & self.auto
        use = link_active.copy()
        use[self.slots()] &= ~act_valve
        press = act_valve & np.isin(self.kind, (PRV, PSV))
        src = np.full(int(press.sum()), self.nj)
        rows = np.concatenate([f[use], self.ctrl[press]])
        cols = np.concatenate([t[use], src])
        return sp.coo_matrix((np.ones(len(rows)), (rows, cols)), shape=(net.n_nodes,) * 2)

    def _components(self, state, link_active):
        _, labels = connected_components(self._coupled_graph(state, link_active), directed=False)
        return labels

    def cut_off(self, link_active, state) -> np.ndarray:
        """Junctions no source or active pressure valve feeds through coupled links."""
        key = (link_active.tobytes(), state.tobytes())
        cut = self._cut_cache.get(key)
        if cut is not None:
            return cut
        labels = self._components(state, link_active)
        fed = np.zeros(labels.max() + 1, dtype=bool)
        fed[labels[self.nj:]] = True
        return self._cut_cache.put(key, ~fed[labels[: self.nj]])

    def _cuts(self, state, demand) -> np.ndarray:
        active = self._link_active(state)
        return self.cut_off(active, state) & (np.abs(demand) > 0)

    def _link_active(self, state):
        """Active links of the whole network (pipes/pumps as the network gives them)."""
        net = self.network
        return np.concatenate([net.status != PipeStatus.CLOSED,
                               np.asarray(net.pumps.speed) > 0, state != CLOSED])

    # --- at the solution -----------------------------------------------------------------------
    def check(self, q, H, state, flips, held, demand, iterations) -> list[str]:
        """Raise when a frozen or held valve contradicts the solution; return notes naming frozen
        valves that agree with it."""
        qv = q[self.slots()]
        wrong = self.auto & (self._wanted(qv, H, state) != state)
        frozen = flips >= self.max_status_changes
        bad_held = wrong & held & ~frozen
        if bad_held.any():
            cut = self.cut_off(self._link_active(self._wanted(qv, H, state)),
                               self._wanted(qv, H, state)) & (np.abs(demand) > 0)
            nodes = ", ".join(str(i) for i in self.network.node_ids[: self.nj][cut][:10])
            ids = ", ".join(str(i) for i in self.ids[bad_held])
            raise NetworkError(Problem(
                f"valve(s) {ids} would have to close or limit the flow, but they are the only "
                f"supply of junction(s) {nodes} with demand; the setting cannot hold",
                field="valves", expected="another supply of those junctions, or a setting the "
                "network can meet"))
        if (wrong & frozen).any():
            ids = [str(i) for i in self.ids[wrong & frozen]]
            raise ConvergenceError(
                f"valve state kept flipping and was frozen inconsistent with the solution at "
                f"valve(s) {', '.join(ids)}; check their settings against the grades around them",
                iterations=iterations, worst_links=ids)
        return [f"valve {i}: state flipped {int(n)} times and was frozen "
                f"{STATE_WORDS[s]} (consistent with the solution)"
                for i, n, s in zip(self.ids[frozen & self.auto], flips[frozen & self.auto],
                                   state[frozen & self.auto])]

    def zones(self, state, link_active, isolated) -> np.ndarray:
        """Zone label per junction: the id(s) of the source(s) its part holds, else of the active
        valve(s) whose downstream side it is ('V1+V2'); '' when cut off. Cached per states."""
        key = (link_active.tobytes(), state.tobytes(), np.asarray(isolated).tobytes())
        zone = self._zone_cache.get(key)
        if zone is not None:
            return zone
        net = self.network
        base = self._components_plain(state, link_active)
        names: dict[int, list[str]] = {}
        for i in range(self.nj, net.n_nodes):
            names.setdefault(int(base[i]), []).append(str(net.node_ids[i]))
        with_source = set(names)
        for k in np.flatnonzero((state == ACTIVE) & self.auto):
            lab = int(base[self.to[k]])
            if lab not in with_source:
                names.setdefault(lab, []).append(str(self.ids[k]))
        # one label per part, then one gather over the junctions (no loop per junction: 0.09 s
        # at 100k junctions)
        labels = np.full(int(base.max(initial=-1)) + 1, "", dtype=object)
        for lab, ids in names.items():
            labels[lab] = "+".join(ids)
        zone = labels[base[: self.nj]]
        zone[np.asarray(isolated, dtype=bool)] = ""
        return self._zone_cache.put(key, zone)

    def _components_plain(self, state, link_active):
        """Components over the coupled links without the virtual source links."""
        net = self.network
        f, t = self._all_links(net)
        use = link_active.copy()
        use[self.slots()] &= ~((state == ACTIVE) & self.auto)
        g = sp.coo_matrix((np.ones(int(use.sum())), (f[use], t[use])), shape=(net.n_nodes,) * 2)
        return connected_components(g, directed=False)[1]


def annotate(valves: ValveLinks, result, q, H, state, notes, link_active, isolated):
    """Valve flow, head loss ``H_from - H_to`` and state, and each junction's zone, on ``result``."""
    s = valves.slots()
    qv = np.where(state == CLOSED, 0.0, q[s])
    result.valve_flow = qv
    result.valve_headloss = H[valves.frm] - H[valves.to]
    result.valve_state = STATE_WORDS[state]
    result.valve_notes = list(notes)
    result._valve_state = state.copy()
    result.zone = valves.zones(state, link_active, isolated)
    return result


def sensitivity_solve(solver, result, w, b1, b2, pat, iso):
    """Sensitivities with active valves: the solver's system (stiff one-sided links, lagged far
    side) at its fixed point, one factorization for all columns.

    The valve rows are exact at the fixed point (``dH = -dF1/dp`` at the controlled node, as
    ``H_node = H_set`` asks), by the same proximal term as in the solver. Returns (dH, dQ) as
    ``sensitivity.sensitivities``. The fixed point is solved exactly: the valve rows' misfit is
    affine in the valves' flow changes, so one solve with a unit flow change per valve beside
    the right-hand sides gives it."""
    valves: ValveLinks = solver.valves
    state = result._valve_state
    s = valves.slots()
    act = (state == ACTIVE) & valves.auto
    wv = np.where(act, 0.0, w[s])
    w = w.copy()
    w[s] = wv
    near = np.bincount(valves._near_owner, weights=w[valves._near_link], minlength=valves.n)
    w_s = np.where(act & np.isin(valves.kind, (PRV, PSV)), STIFFNESS * np.maximum(near, 1e-12),
                   0.0)
    extra = iso.astype(float) + np.bincount(valves.ctrl, weights=w_s,
                                            minlength=solver.network.n_nodes)[: solver.nj]
    S = pat.hold(pat.assemble(w, extra), iso)  # iso includes held junctions (Snapshot.held_head)
    factor = pat.factorize_scratch(S)
    b1 = b1.copy()
    # an active valve's equation holds a grade or a flow: no roughness or source grade enters it
    b1[s][act] = 0.0
    wb1 = w[:, None] * b1
    sign = np.where(valves.kind == PSV, 1.0, -1.0)
    base = b2 - pat.inflow_matrix(wb1)
    # the stiff links' term at each controlled junction (a source-side node takes none)
    at = valves.ctrl < solver.nj
    np.add.at(base, valves.ctrl[at], (sign * w_s)[at, None] * b1[s][at])
    nj = solver.nj
    dq_v = np.zeros((valves.n, b1.shape[1]))
    press = act & valves.pressure_valve
    ctrl_sign = np.where(valves.kind == PSV, -1.0, 1.0)  # A21 entry at the controlled end
    far = np.where(valves.kind == PSV, valves.to, valves.frm)  # the lagged end
    far_sign = -ctrl_sign  # A21 entry at that end
    lag = press & (far < nj)
    prv = act & (valves.kind == PRV)
    psv = act & (valves.kind == PSV)
    n_src = solver.network.n_sources

    def misfit(dH, b1s):
        """The valve rows' misfit g for grades dH (junctions x columns), affine in them and in
        b1s; the fixed point of the lagged iteration is g = 0."""
        dHn = np.vstack([dH, np.zeros((n_src, dH.shape[1]))])
        g = np.zeros((valves.n, dH.shape[1]))
        g[prv] = -w_s[prv, None] * (b1s[prv] + dHn[valves.to[prv]])
        g[psv] = -w_s[psv, None] * (b1s[psv] - dHn[valves.frm[psv]])
        return g

    # The last flow change of each valve enters the right-hand side at its far end as a lagged
    # demand or supply, and at its controlled end as the proximal term that makes dH there exact
    # at the fixed point. g is affine in those flow changes and the same linear map acts on every
    # column: the grades of the constant part and of a unit flow change per active pressure valve
    # come from one solve with all columns, g(dq_v) = 0 is solved exactly, and the grades follow
    # by linearity (instead of iterating the lagged system to its fixed point).
    rhs0 = base.copy()
    rhs0[iso] = 0.0
    idx = np.flatnonzero(press)
    if idx.size:
        # valves in different connected parts of S (copies of a stacked network) share a column
        # (see ``ValveLinks.couple``); each valve's grades are its column within its part
        part = pat.blocks
        vpart = part[valves.ctrl[idx]]
        order = np.argsort(vpart, kind="stable")
        cols = np.empty(idx.size, dtype=np.int64)
        cols[order] = np.arange(idx.size) - np.searchsorted(vpart[order], vpart[order])
        n_col = int(cols.max()) + 1
        unit = np.zeros((nj, n_col))
        at_far = lag[idx]
        np.add.at(unit, (far[idx][at_far], cols[at_far]), far_sign[idx][at_far])
        np.add.at(unit, (valves.ctrl[idx], cols), ctrl_sign[idx])
        unit[iso] = 0.0
        both = factor(np.hstack([rhs0, unit]))
        dH0 = both[:, :-n_col]
        dHu = both[:, -n_col:][:, cols] * (part[:, None] == vpart[None, :])
        A = misfit(dHu, np.zeros((valves.n, idx.size)))[idx]
        g0 = misfit(dH0, b1[s])[idx]
        try:
            dq_v[idx] = np.linalg.solve(A, -g0)
        except np.linalg.LinAlgError:
            dq_v[idx] = np.linalg.lstsq(A, -g0, rcond=None)[0]
        dH = dH0 + dHu @ dq_v[idx]
    else:
        dH = factor(rhs0)
    dQ = -(wb1 - w[:, None] * pat.across_junctions(dH))  # sources: dH = 0
    dQ[s] = np.where(act[:, None], dq_v, dQ[s])
    return dH, dQ
