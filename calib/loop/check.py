"""The on-site check: is each reading one that some plausible state of the network explains?

Method (a sequential Bayesian check; published names kept):

- The state is each group's C with a Gaussian uncertainty (``state.GroupState``: the handbook prior, or
  the last fit's intervals), augmented for each test with the grade of every source (the level noted
  for the test, sd ``TANK_SD``; a source with no noted level keeps the model's grade, sd
  ``UNNOTED_SOURCE_SD``) and a flow scale (the flows as measured, sd ``FLOW_SD``).
- Prediction: the test solved at the state's mean; the grade at each gauge carries the variance
  ``J P J^T + sigma^2`` (first-order propagation through the analytic Jacobian, ``linear.py``, plus the
  gauge's stated accuracy). A reading inside ``mean +/- z sd`` is ``ok``.
- A reading outside is confirmed without the linearization: the most plausible state that explains it
  minimizes ``((h(x) - y) / sigma)^2 + (x - m)^T P^-1 (x - m)`` (Gauss-Newton; the iterated extended
  Kalman filter update, Jazwinski 1970, *Stochastic Processes and Filtering Theory*, ch. 8). It is
  ``suspect`` only when that minimum exceeds ``z^2``: no plausible state explains it. The test's
  readings are also judged together: while their joint minimum exceeds the chi-square point
  ``1 - 0.05 / 12`` for their number (a day of about 12 tests at a 5 % family-wise rate, Bonferroni),
  the one whose leaving out lowers that minimum most is suspect.
- Running fit: the state is then updated with the test's ``ok`` readings (the same iterated update:
  a running weighted least-squares fit with the prior included), so that each test is judged with only
  the tests before it, in the order taken.
- A suspect reading's likely causes are ranked by how well each explains the test's readings (the
  same minimum, one extra unknown per cause): the reading misread, the gauge height or hydrant
  elevation wrong (an offset on both readings of that gauge), the pitot or outlet misread (the flow
  scale freed), a closed or throttled pipe (``closures.py``).

``z = 3.29``: a day of about 50 readings judged at a 5 % family-wise rate (Bonferroni: 0.05 / 50
two-sided gives the normal 99.95 % point, 3.29), so that a crew hears "suspect" about once in twenty
good days.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import stats

from calib import units
from calib.errors import CalibError
from calib.loop.linear import Linearizer, TestReadings
from calib.loop.state import GroupState

Z_SUSPECT = 3.29  # see the module docstring (Bonferroni over a day's readings, 5 %)
JOINT_P = 1.0 - 0.05 / 12  # a test's readings together: 5 % family-wise over a day of about 12 tests
TANK_SD = 1.0 * units.FT  # [m] a noted tank or plant grade read from telemetry or a level gauge (our judgement)
UNNOTED_SOURCE_SD = 10.0 * units.FT  # [m] a source whose grade was not noted: anywhere in its usual band
FLOW_SD = 0.05  # [-] flows from pitot or meter readings, about +/-5 % (1 sd; common practice)
GAUGE_HEIGHT_SD = 10.0 * units.FT  # [m] cause "gauge height": an offset this large is plausible
PITOT_SD = 0.30  # [-] cause "pitot": the flow off by up to about a third
ACTIONS_IN_REASON = 2  # a suspect verdict's reason says the first this many actions "before leaving"
C_LIMITS = (20.0, 170.0)  # C is kept inside these while searching (a state beyond is implausible)
SENSITIVE = 0.02  # [m of grade per unit C] below this a reading says little about C


@dataclass
class Verdict:
    """One reading judged: pressures at the gauge [Pa], the verdict and why in words."""

    test_id: str
    node: str
    kind: str
    observed: float
    predicted: float
    low: float
    high: float
    verdict: str  # "ok" | "suspect"
    reason: str
    causes: list = field(default_factory=list)  # suspect: [(cause, advice)], most likely first
    row: int = -1  # position in the TestSet (-1 for the app's single test)

    @property
    def suspect(self) -> bool:
        return self.verdict == "suspect"


def assumptions(z: float = Z_SUSPECT) -> list[str]:
    """The stated uncertainties the check uses (printed with its outputs)."""
    f = lambda m: f"{m / units.FT:g} ft"  # noqa: E731
    return [f"a reading is suspect beyond {z:g} sd of its prediction and when no plausible state explains it",
            f"tank and plant grades as noted for the test, sd {f(TANK_SD)}; a source with none noted keeps "
            f"the model's grade, sd {f(UNNOTED_SOURCE_SD)}",
            f"flows as measured, sd {FLOW_SD:.0%}",
            "gauge accuracy as stated per reading (pressures.csv sigma, else --sigma)"]


def _round5(c: float) -> int:
    return int(5 * round(c / 5.0))


class SequentialCheck:
    """Judges tests one after another, each with only the tests before it (``judge`` updates the state)."""

    def __init__(self, network, grouping, state: GroupState, solver=None, z: float = Z_SUSPECT,
                 closures=None):
        self.network, self.grouping = network, grouping
        self.lin = Linearizer(network, grouping, solver)
        self.state = state.copy()
        self.z = float(z)
        self.model_c = grouping.length_weighted(network, network.roughness)
        self.closures = closures  # callable(test, state_vector) -> (pipe id, misfit) or None

    # --- the state of one test ---------------------------------------------------------------
    def prior(self, test: TestReadings):
        """Mean and covariance of ``[C, source grades, flow scale]`` before ``test``."""
        lin, G, S = self.lin, self.lin.G, self.lin.S
        m = lin.nominal(self.state.mean, test)
        P = np.zeros((lin.n_state, lin.n_state))
        P[:G, :G] = self.state.cov
        noted = {int(s) - self.network.n_junctions for s in test.source_head}
        for s in range(S):
            P[G + s, G + s] = (TANK_SD if s in noted else UNNOTED_SOURCE_SD) ** 2
        P[-1, -1] = FLOW_SD ** 2
        return m, P

    def map_state(self, test, m, P, rows, extra=None, extra_sd=None, iters: int = 8, x0=None):
        """Most plausible state explaining readings ``rows``: iterated extended Kalman update.

        ``extra`` (n_readings x e) adds linear unknowns (e.g. a gauge offset) with prior sd ``extra_sd``.
        Returns ``(x, P_post, cost, h)``: ``cost = sum(r^2) + (x - m)^T P^-1 (x - m)`` at ``x``.
        """
        rows = np.asarray(rows, dtype=np.int64)
        y, sig = test.hgl[rows], test.sigma_head[rows]
        n = len(m)
        E = np.zeros((len(test.node), 0)) if extra is None else np.asarray(extra, float)
        e = E.shape[1]
        ma = np.concatenate([m, np.zeros(e)])
        Pa = np.zeros((n + e, n + e))
        Pa[:n, :n] = P
        if e:
            Pa[n:, n:] = np.diag(np.asarray(extra_sd, float) ** 2)
        x = ma.copy()
        if x0 is not None:  # a nearby start (the test's joint state): same minimum, fewer solves
            x[:n] = np.asarray(x0, float)[:n]
        K = H = None
        for _ in range(iters):
            h, J = self.lin.at(x[:n], test)
            H = np.hstack([J[rows], E[rows]])
            hr = h[rows] + E[rows] @ x[n:]
            Sm = H @ Pa @ H.T + np.diag(sig ** 2)
            K = np.linalg.solve(Sm, H @ Pa).T  # Pa H^T S^-1 (S and Pa symmetric)
            x_new = ma + K @ (y - hr - H @ (ma - x))
            x_new[: self.lin.G] = np.clip(x_new[: self.lin.G], *C_LIMITS)
            x_new[n - 1] = np.clip(x_new[n - 1], 0.2, 3.0)
            # converged when no unknown moves by more than 1 % of its prior sd
            step = np.max(np.abs(x_new - x) / np.sqrt(np.maximum(np.diag(Pa), 1e-12))) if len(x) else 0.0
            x = x_new
            if step < 1e-2:
                break
        h, _ = self.lin.at(x[:n], test)  # with its Jacobian: the next search often starts here
        r = (h[rows] + E[rows] @ x[n:] - y) / sig
        d = x - ma
        cost = float(r @ r + d @ np.linalg.solve(Pa, d))
        P_post = Pa - K @ H @ Pa if K is not None else Pa
        return x, P_post, cost, h + E @ x[n:]

    # --- judging -------------------------------------------------------------------------------
    def judge(self, test: TestReadings) -> list[Verdict]:
        """Verdicts for ``test``'s readings; then the state learns from its ``ok`` readings."""
        G = self.lin.G
        m, P = self.prior(test)
        h0, J0 = self.lin.at(m, test)
        sig = test.sigma_head
        sd = np.sqrt(np.einsum("ij,jk,ik->i", J0, P, J0) + sig ** 2)
        y = test.hgl
        n = len(y)
        suspect = np.zeros(n, dtype=bool)
        why = [""] * n
        for i in np.flatnonzero(np.abs(y - h0) > self.z * sd):
            _, _, cost, _ = self.map_state(test, m, P, [i])
            if cost > self.z ** 2:
                suspect[i] = True
                why[i] = "no plausible C, tank level, flow or gauge error explains it"
        # the test's readings together
        ok = np.flatnonzero(~suspect)
        x, P_post, cost = m, P, 0.0
        while ok.size:
            x, P_post, cost, h = self.map_state(test, m, P, ok)
            if ok.size < 2 or cost <= stats.chi2.ppf(JOINT_P, ok.size):
                break
            # the reading whose leaving out explains the rest best (not merely the largest residual:
            # a bad reading pulls the state towards itself and a good one then looks worse)
            worst = min(ok, key=lambda k: self.map_state(test, m, P, ok[ok != k], x0=x)[2])
            suspect[worst] = True
            why[worst] = "no plausible state explains it together with the test's other readings"
            ok = ok[ok != worst]
        if ok.size:
            self.state.mean = x[:G].copy()
            self.state.cov = P_post[:G, :G].copy()
        pred = test.head_to_gauge(h0)
        low, high = test.head_to_gauge(h0 - self.z * sd), test.head_to_gauge(h0 + self.z * sd)
        causes = self._causes(test, m, P, np.flatnonzero(suspect), x) if suspect.any() else {}
        out = []
        ids = self.network.node_ids
        for i in range(n):
            node = str(ids[test.node[i]])
            if suspect[i]:
                reason, cl = self._suspect_text(test, i, pred[i], low[i], high[i], why[i], causes[i])
                verdict = "suspect"
            else:
                reason, cl, verdict = self._ok_text(test, i, J0, x), [], "ok"
            out.append(Verdict(test.test_id, node, str(test.kind[i]), float(test.pressure[i]),
                               float(pred[i]), float(low[i]), float(high[i]), verdict, reason, cl,
                               int(test.rows[i]) if len(test.rows) else -1))
        return out

    def _ok_text(self, test, i, J0, x) -> str:
        G = self.lin.G
        if test.kind[i] == "static":
            return ("consistent: the static agrees with the source grades noted, within the tank level's "
                    "and the gauge's uncertainty")
        weight = np.abs(J0[i, :G]) * np.sqrt(np.maximum(np.diag(self.state.cov), 0) + 1e-9)
        g = int(np.argmax(weight))
        if np.abs(J0[i, g]) < SENSITIVE:
            return "consistent: this gauge drops too little to say much about C"
        c, cm = float(x[g]), float(self.model_c[g])
        name = self.grouping.names[g]
        if c < cm - 10:
            how = "older than the model says"
        elif c > cm + 10:
            how = "smoother than the model says"
        else:
            how = "as the model says"
        return f"consistent: the mains here ({name}) behave like C about {_round5(c)}, {how} ({cm:.0f})"

    def _causes(self, test, m, P, bad, x0=None) -> dict:
        """Per suspect reading: [(cause, advice, cost)] most likely first (lower cost)."""
        ids = self.network.node_ids
        all_rows = np.arange(len(test.node))
        flowing = ", ".join(str(ids[n]) for n in test.flows) or "the flowing hydrant"
        # the pitot: the flow scale freed
        Pp = P.copy()
        Pp[-1, -1] = PITOT_SD ** 2
        pitot_cost = self.map_state(test, m, Pp, all_rows, x0=x0)[2]
        closure = None
        if self.closures is not None:
            try:
                closure = self.closures(test, m)
            except CalibError:
                closure = None
        out = {}
        for i in bad:
            node = ids[test.node[i]]
            kind = str(test.kind[i])
            rest = all_rows[all_rows != i]
            cands = []
            if rest.size:
                cands.append((f"the {kind} at {node} misread or written down wrong",
                              f"re-read the {kind} gauge at {node}" + (" with the hydrants flowing again"
                                                                        if kind == "residual" else ""),
                              self.map_state(test, m, P, rest, x0=x0)[2]))
            else:
                cands.append((f"the {kind} at {node} misread", f"re-read the {kind} gauge at {node}", 0.0))
            E = (test.node == test.node[i]).astype(float)[:, None]
            cands.append((f"the gauge height or the hydrant's elevation at {node} wrong",
                          f"measure the gauge height above the node at {node} and check the hydrant's "
                          "elevation on the map", self.map_state(test, m, P, all_rows, E, [GAUGE_HEIGHT_SD], x0=x0)[2]))
            cands.append(("the pitot reading or the outlet size misread",
                          f"re-read the pitot at {flowing} and check the outlet diameter and coefficient",
                          pitot_cost))
            if closure is not None:
                pipe, cost = closure
                cands.append((f"a closed or partly closed valve (pipe {pipe} explains it best)",
                              "look for a closed valve near the test and tell the office (python -m calib "
                              f"closures ... --test {test.test_id})", cost))
            else:
                cands.append(("a closed or partly closed valve near the test",
                              "look for a closed valve near the test and tell the office", np.inf))
            cands.sort(key=lambda c: c[2])
            out[i] = cands
        return out

    def _suspect_text(self, test, i, pred, low, high, why, causes):
        unit = "psi"
        f = lambda v: f"{units.from_si(v, 'pressure', unit):.1f}"  # noqa: E731
        obs = f"{f(test.pressure[i])} {unit}"
        if low <= test.pressure[i] <= high:
            lines = [f"suspect: {obs} is inside what it could read alone ({f(low)}-{f(high)} {unit}) but {why}"]
        else:
            lines = [f"suspect: {obs} is outside {f(low)}-{f(high)} {unit} and {why}"]
        ranked = [(c, a) for c, a, _ in causes]
        lines.append("Likely causes: " + "; ".join(f"{k + 1}) {c}" for k, (c, _) in enumerate(ranked[:3])))
        lines.append("Before leaving: " + "; then ".join(a for _, a in ranked[:ACTIONS_IN_REASON]))
        return ". ".join(lines), ranked


def check_tests(network, tests, state: GroupState, grouping, solver=None, z: float = Z_SUSPECT,
                closures=None, progress=None) -> list[Verdict]:
    """Judge every test of a ``TestSet`` in the order taken (tests.csv date, else test id)."""
    from calib.loop.linear import split_tests
    checker = SequentialCheck(network, grouping, state, solver=solver, z=z, closures=closures)
    out = []
    for test in split_tests(tests):
        out.extend(checker.judge(test))
        if progress is not None:
            progress(test.test_id)
    return out
