"""Which closed (or throttled) pipe would best explain a test's readings.

A valve closed in the street but open in the model is the most common cause of a test that no C-factor
explains (Walski 1983, J. Water Resour. Plann. Manage. 109(4); Walski et al. 2003, *Advanced Water
Distribution Modeling and Management*, calibration chapter). Method:

1. Screen every open pipe with the analytic sensitivities: for ``p_k = ln(r_k)`` (the log of pipe k's
   resistance), ``dF1_k/dp_k = h_k`` (its friction loss), so ``dH_g/dp_k = a_g[k] h_k`` where ``a_g`` is
   the flow response to a unit demand at gauge node g - one adjoint solve per gauge node, because the
   global gradient system ``[[D, A12], [A12^T, 0]]`` is symmetric (Todini and Pilati 1988). Closing
   pipe k removes its conductance ``g_k = 1/D_k`` from the linearized network; by the Sherman-Morrison
   formula that scales the first-order change by ``beta_k = 1 / (1 - g_k R_k)``, with ``R_k`` the
   effective resistance between the pipe's ends (``(e_i - e_j)^T S^-1 (e_i - e_j)`` for the Schur
   complement S; exact for up to ``EXACT_NODES`` junctions, else estimated with ``JL_VECTORS`` random
   projections, Spielman and Srivastava 2011, SIAM J. Comput. 40(6)). A pipe scores the misfit
   ``|r + delta s_k|^2`` left at the best ``delta`` in ``[0, beta_k]`` (open to closed), with
   ``r = (h - y) / sigma``.
2. Confirm the best screened ones with exact solves: the pipe's resistance multiplied by 10, 100 and
   ``CLOSED`` (its C scaled by ``m^(-1/1.852)``, Hazen-Williams), keeping the best. A valve shut in
   the street is shut for every test of the day, so each is solved for the day's other tests too
   (``rank(others=...)``; a test whose readings the closure moves by less than ``SKIP`` sigma to first
   order keeps its first-order values) and scored on all their readings: the weighted sum of squares,
   with the C's uncertainty when its covariance is given (generalized least squares), plus
   ``SETTING_PENALTY`` for a partly closed setting, one fitted unknown (Akaike 1974, IEEE Trans.
   Autom. Control 19(6)). Measured on generated days (benchmarks/README.md): scored on one test's few
   readings a partly closed neighbour or another closure often fits them better than the truth; the
   other tests tell them apart.
3. Pipes in series (through junctions with two pipes and no gauge or flow of the test) carry the same
   flow: no test there can tell them apart; the note says so.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from calib.errors import ConvergenceError
from calib.hydraulics.headloss import HW_FLOW_EXPONENT
from calib.loop.linear import Linearizer, TestReadings

CLOSED = 1.0e8  # resistance multiplier taken as closed (flow about 5e-5 of open at the same loss)
THROTTLES = (10.0, 100.0)  # partly closed settings tried besides closed
THROTTLE_BEST = 8  # the partly closed settings are tried on this many of the best closed
SETTING_PENALTY = 2.0  # a partly closed setting is one more fitted unknown: Akaike (1974) adds 2 per unknown
SKIP = 0.05  # [sigma] another test's readings a closure moves less than this (first order): not re-solved
TIE = 3.84  # misfits closer than the chi-square 95 % point on 1 degree of freedom: the data cannot tell
EXACT_NODES = 1500  # effective resistances exactly (a dense inverse) up to this many junctions
JL_VECTORS = 64  # random projections for the effective resistances of larger networks


@dataclass
class Closure:
    """One candidate: pipe index and id, its ends, misfits (weighted sums of squares) and a note."""

    pipe: int
    pipe_id: str
    start: str
    end: str
    misfit_before: float
    misfit_after: float
    multiplier: float
    note: str = ""
    screen: float = np.nan
    day_before: float = np.nan  # over the test and the day's other tests scored with it
    day_after: float = np.nan
    score: float = np.nan  # day_after, plus SETTING_PENALTY when partly closed: the ranking key


def _snapshot_key(lin, test: TestReadings, state, kind: str) -> tuple:
    """What a snapshot of ``test`` at ``state`` depends on: its kind, source grades, and for the
    flowing one the flow scale and the flows."""
    heads = tuple(np.asarray(state, float)[lin.G: lin.G + lin.S].tolist())
    if kind != "residual":
        return (kind, heads)
    return (kind, heads, float(state[-1]), tuple(sorted((int(n), float(q)) for n, q in test.flows.items())))


class ClosureFinder:
    """Ranks pipes whose closing or throttling best explains one test (``rank``)."""

    def __init__(self, network, grouping, solver=None, linearizer: Linearizer | None = None):
        self.network = network
        self.lin = linearizer or Linearizer(network, grouping, solver)
        nj = network.n_junctions
        degree = np.bincount(np.concatenate([network.pipe_from, network.pipe_to]), minlength=network.n_nodes)
        self._degree2 = np.flatnonzero(degree[:nj] == 2)
        self._open = np.flatnonzero(np.asarray(network.status) == 0) if hasattr(network, "status") \
            else np.arange(network.n_pipes)

    # --- pieces --------------------------------------------------------------------------------
    def misfit(self, test: TestReadings, state, roughness=None, warm=None) -> float:
        h = self.lin.at(state, test, roughness=roughness, jacobian=False, warm=warm)
        r = (h - test.hgl) / test.sigma_head
        return float(r @ r)

    def _measure(self, day, cov):
        """residuals [m] of the day's readings (stacked) -> (misfit of the first test, of all)."""
        sig = np.concatenate([t.sigma_head for t, _ in day])
        n0 = len(day[0][0].node)
        if cov is None:
            def plain(r):
                w = (r / sig) ** 2
                return float(w[:n0].sum()), float(w.sum())
            return plain
        lin, G = self.lin, self.lin.G
        cov = np.asarray(cov, float)
        Js = [lin.at(x, t)[1] for t, x in day]
        JC = np.vstack([J[:, :G] for J in Js])
        V = JC @ cov[:G, :G] @ JC.T + np.diag(sig ** 2)
        at = 0
        for J in Js:  # each test's own source grades and flow scale
            n = len(J)
            V[at:at + n, at:at + n] += J[:, G:] @ cov[G:, G:] @ J[:, G:].T
            at += n
        L_all = np.linalg.cholesky(V)
        L_one = np.linalg.cholesky(V[:n0, :n0])

        def generalized(r):
            a = np.linalg.solve(L_all, r)
            b = np.linalg.solve(L_one, r[:n0])
            return float(b @ b), float(a @ a)
        return generalized

    def screen(self, test: TestReadings, state) -> np.ndarray:
        """Per pipe: the linearized misfit left after its best resistance increase (inf: cannot help)."""
        return _screen_left(*self._linearize(test, state))

    def _linearize(self, test: TestReadings, state, others=()):
        """First-order change of each test's readings with each pipe's resistance:
        ``(r_parts, S_parts, beta)``, per test (``test`` first, then ``others``, each a
        ``(TestReadings, state)``) its weighted residuals and their derivatives by ln r_k, and per
        pipe the Sherman-Morrison factor of closing it, from ``test``'s flowing snapshot."""
        net, lin = self.network, self.lin
        n_links = lin.n_links
        r_parts, S_parts = [], []
        beta = None
        for t, x in [(test, state)] + list(others):
            r_all = np.zeros(len(t.node))
            S = np.zeros((len(t.node), net.n_pipes))
            rough = lin.roughness(np.asarray(x)[: lin.G])
            for kind in ("static", "residual"):
                rows = np.flatnonzero(t.kind == kind)
                if rows.size == 0:
                    continue
                res = lin.solve(x, t, kind)
                r_all[rows] = (np.asarray(res.head)[t.node[rows]] - t.hgl[rows]) / t.sigma_head[rows]
                nodes = np.unique(t.node[rows])
                nodes = nodes[nodes < net.n_junctions]
                if nodes.size == 0:
                    continue
                unit = sp.csc_matrix((np.ones(len(nodes)), (nodes, np.arange(len(nodes)))),
                                     shape=(net.n_junctions, len(nodes)))
                _, a = lin.solver.sensitivities(res, sp.csc_matrix((n_links, len(nodes))), unit)
                a = a.toarray() if sp.issparse(a) else np.asarray(a)
                # dh_k/dp_k for p_k = ln r_k: the friction loss, from dh/dC = -1.852 h / C
                dhdp = -np.asarray(lin.solver.dheadloss_droughness(res), float) * rough / HW_FLOW_EXPONENT
                col = {int(n): c for c, n in enumerate(nodes)}
                for i in rows:
                    S[i] = a[: net.n_pipes, col[int(t.node[i])]] * dhdp / t.sigma_head[i]
                if t is test and (kind == "residual" or beta is None):
                    beta = self._beta(res)
            r_parts.append(r_all)
            S_parts.append(S)
        if beta is None:
            beta = np.ones(net.n_pipes)
        return r_parts, S_parts, beta

    def _beta(self, res) -> np.ndarray:
        """Per pipe: 1 / (1 - g_k R_k), the Sherman-Morrison factor of closing it in the linear network."""
        net, lin = self.network, self.lin
        nj, n_links = net.n_junctions, lin.n_links
        active = np.asarray(res._active, bool)
        g = np.where(active, 1.0 / res._grad, 0.0)[: net.n_pipes]
        frm, to = net.pipe_from, net.pipe_to
        zeros = lambda p: sp.csc_matrix((n_links, p))  # noqa: E731
        if nj <= EXACT_NODES:
            dH, _ = lin.solver.sensitivities(res, zeros(nj), sp.identity(nj, format="csc"))
            Sinv = np.vstack([np.asarray(dH.toarray() if sp.issparse(dH) else dH), np.zeros((net.n_sources, nj))])
            Sinv = np.hstack([Sinv, np.zeros((Sinv.shape[0], net.n_sources))])
            R = Sinv[frm, frm] + Sinv[to, to] - 2.0 * Sinv[frm, to]
        else:
            rng = np.random.default_rng(0)
            wl = np.where(active, 1.0 / res._grad, 0.0)
            lf, lt = lin.solver.link_from, lin.solver.link_to
            Q = rng.choice([-1.0, 1.0], size=(JL_VECTORS, n_links)) / np.sqrt(JL_VECTORS)
            Y = np.zeros((JL_VECTORS, net.n_nodes))  # Q W^1/2 B, B the link-node incidence
            np.add.at(Y.T, lf, (Q * np.sqrt(wl)).T)
            np.add.at(Y.T, lt, -(Q * np.sqrt(wl)).T)
            dH, _ = lin.solver.sensitivities(res, zeros(JL_VECTORS), Y[:, :nj].T)
            Z = np.vstack([np.asarray(dH.toarray() if sp.issparse(dH) else dH), np.zeros((net.n_sources, JL_VECTORS))])
            R = np.sum((Z[frm] - Z[to]) ** 2, axis=1)
        gr = np.clip(g * np.abs(R), 0.0, 0.999)  # 1: a bridge, whose closing cuts the network apart
        return 1.0 / (1.0 - gr)

    def _series_chains(self, test: TestReadings, others=()) -> np.ndarray:
        """Chain label per pipe: pipes joined through degree-2 junctions outside the tests share one."""
        net = self.network
        parent = np.arange(net.n_pipes)

        def find(k):
            while parent[k] != k:
                parent[k] = parent[parent[k]]
                k = parent[k]
            return k
        busy = set()
        for t in [test, *others]:
            busy |= set(int(n) for n in t.node) | set(int(n) for n in t.flows)
        inc = {}
        for k, (a, b) in enumerate(zip(net.pipe_from, net.pipe_to)):
            inc.setdefault(int(a), []).append(k)
            inc.setdefault(int(b), []).append(k)
        for node in self._degree2:
            if int(node) in busy:
                continue
            k1, k2 = inc[int(node)]
            parent[find(k1)] = find(k2)
        return np.array([find(k) for k in range(net.n_pipes)])

    # --- the ranking -----------------------------------------------------------------------------
    def rank(self, test: TestReadings, state, top: int = 10, confirm: int = 25, others=(),
             cov=None, min_drop: float = TIE) -> list[Closure]:
        """The ``top`` pipes whose closing or throttling best explains ``test``, best first.

        ``others``: the day's other tests (``TestReadings``), each solved at ``state``'s C with its own
        noted source grades. A valve shut in the street is shut for every test of the day, so a
        candidate is scored on all their readings (``day_after``), plus ``SETTING_PENALTY`` for a
        partly closed setting (one fitted unknown; Akaike 1974). ``misfit_before``/``misfit_after``
        stay ``test``'s own.

        ``cov``: covariance of ``state`` (``[C per group, source grades, flow scale]``, as the check's
        ``prior``), or None for a state taken as known. A misfit is ``r^T (Sigma + J cov J^T)^-1 r``
        over the readings' residuals ``r`` [m], ``Sigma`` the gauges' stated accuracy squared and ``J``
        the open network's Jacobian: the weighted sum of squares left at the most plausible state in
        the linearized model (generalized least squares; the C block is shared by the day's tests,
        each test's grades and flow scale are its own). Without it, the plain weighted sum of squares.

        ``min_drop``: a pipe is listed only if closing it lowers ``test``'s misfit by more than this
        (default ``TIE``, the chi-square 95 % point on 1 degree of freedom: a significant drop), so
        that pipes which only explain the other tests' readings stay out.
        """
        net, lin = self.network, self.lin
        state = np.asarray(state, float)
        day = [(test, state)] + [(o, lin.nominal(state[: lin.G], o)) for o in others
                                 if o.test_id != test.test_id]
        sizes = [len(t.node) for t, _ in day]
        ends = np.cumsum(sizes)
        y = np.concatenate([t.hgl for t, _ in day])
        measure = self._measure(day, cov)
        # the screen ranks by ``test``'s readings; the other tests' first-order changes let the
        # confirming solves skip the loadings a closure cannot move
        r_lin, S_lin, beta = self._linearize(test, state, others=day[1:])
        left = _screen_left(r_lin, S_lin, beta)
        cand = [int(k) for k in np.argsort(left, kind="stable")[:confirm] if np.isfinite(left[k])]
        base = lin.roughness(state[: lin.G])
        # tests with the same loading share a snapshot (e.g. the day's statics at the same tank level)
        snaps = [{kind: _snapshot_key(lin, t, x, kind) for kind in set(t.kind.tolist())} for t, x in day]
        # every candidate starts from the open network's solution: one pipe changed is a local change
        opened = {}
        for (t, x), keys in zip(day, snaps):
            for kind, key in keys.items():
                if key not in opened:
                    opened[key] = lin.solve(x, t, kind)
        h_open = np.array([float(opened[keys[str(kind)]].head[t.node[i]])
                           for (t, _), keys in zip(day, snaps) for i, kind in enumerate(t.kind)])
        before = measure(h_open - y)
        self.last_before = before  # (this test's misfit, the day's) with every pipe open

        def tried(k, mult):
            rough = base.copy()
            rough[k] = base[k] * mult ** (-1.0 / HW_FLOW_EXPONENT)
            heads, h = {}, h_open.copy()
            try:
                for j, ((t, x), keys) in enumerate(zip(day, snaps)):
                    at = slice(ends[j] - sizes[j], ends[j])
                    for kind, key in keys.items():
                        rows = np.flatnonzero(t.kind == kind)
                        change = S_lin[j][rows, k] * beta[k]  # closed, first order [sigma]
                        if j and key not in heads and np.all(np.abs(change) < SKIP):
                            # a closure that moves these readings so little: first order, no solve
                            h[at][rows] = h_open[at][rows] + change * t.sigma_head[rows]
                            continue
                        if key not in heads:
                            # start the pipe at the flow its new resistance passes at the old loss:
                            # Newton then needs about 5 iterations instead of about 15 for a closure
                            flow = opened[key].flow.copy()
                            flow[k] *= mult ** (-1.0 / HW_FLOW_EXPONENT)
                            warm = dataclasses.replace(opened[key], flow=flow)
                            heads[key] = np.asarray(lin.solve(x, t, kind, roughness=rough, warm=warm).head)
                        h[at][rows] = heads[key][t.node[rows]]
            except ConvergenceError:
                return (np.inf, np.inf)
            return measure(h - y)

        def score(m, mult):
            return float(m[1]) + (0.0 if mult == CLOSED else SETTING_PENALTY)
        # closed first for every screened pipe; the partly closed settings for the best of those
        # (and for any that closing overshoots: worse closed than open)
        best = {k: (tried(k, CLOSED), CLOSED) for k in cand}
        order = sorted(best, key=lambda k: score(*best[k]))
        for k in set(order[:THROTTLE_BEST]) | {k for k in cand if best[k][0][1] > before[1]}:
            for mult in THROTTLES:
                m = tried(k, mult)
                if score(m, mult) < score(*best[k]) - 1e-9:
                    best[k] = (m, mult)
        out = []
        for k in cand:
            m, mult = best[k]
            if not np.all(np.isfinite(m)):
                continue
            note = "closed" if mult == CLOSED else f"partly closed (about {mult:g} x its resistance)"
            c = Closure(k, str(net.pipe_ids[k]), str(net.node_ids[net.pipe_from[k]]),
                        str(net.node_ids[net.pipe_to[k]]), float(before[0]), float(m[0]), mult, note,
                        float(left[k]), float(before[1]), float(m[1]), score(m, mult))
            out.append(c)
        # a closure explains this test only if it lowers the test's misfit by more than ``min_drop``,
        # and fits the day no worse than every pipe open
        out = [c for c in out if c.misfit_after < c.misfit_before - min_drop and c.day_after < c.day_before]
        out.sort(key=lambda c: c.score)
        chains = self._series_chains(test, [t for t, _ in day[1:]])
        first = {}
        for c in out:
            ch = chains[c.pipe]
            if ch in first:
                c.note += f"; in series with {first[ch]}: no test here can tell them apart"
            else:
                first[ch] = c.pipe_id
        for c in out[1:]:
            if out and c.score - out[0].score <= TIE:
                c.note += "; fits as well as rank 1 within the gauges' noise"
        for c in out:
            if c.misfit_after > 0.8 * c.misfit_before:
                c.note += "; explains little of the misfit"
        return out[:top]

    def best_for_check(self, test: TestReadings, state):
        """(pipe id, misfit after) of the best candidate, for the check's ranking of causes."""
        ranked = self.rank(test, state, top=1, confirm=3, min_drop=0.0)
        return (ranked[0].pipe_id, ranked[0].misfit_after) if ranked else None


def _screen_left(r_parts, S_parts, beta) -> np.ndarray:
    """Per pipe: the linearized misfit of the first test left after its best resistance increase
    (inf: cannot help). The screen ranks by that test's readings alone: the other tests'
    linearization at one shared amplitude missed closures that flip a control valve (demo town, a
    pipe by a reducing valve)."""
    r_all, S = r_parts[0], S_parts[0]
    sr = r_all @ S
    ss = np.einsum("ij,ij->j", S, S)
    # misfit left at the best amplitude between open (0) and closed (beta) in the linear network
    delta = np.clip(-np.divide(sr, ss, out=np.zeros_like(sr), where=ss > 0), 0.0, beta)
    left = np.einsum("ij,ij->j", r_all[:, None] + S * delta, r_all[:, None] + S * delta)
    left[(ss <= 0) | (delta <= 0)] = np.inf
    return left
