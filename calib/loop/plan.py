"""Plan the next flow tests: a greedy D- or A-optimal design from the analytic Jacobian.

Method (published names kept):

- Sampling design for calibration after Bush and Uber (1998), "Sampling design methods for water
  distribution model calibration", J. Water Resour. Plann. Manage. 124(6): rank candidate tests by
  the information their readings give about the parameters through the sensitivity (Jacobian) matrix.
- The criteria and the greedy (sequential) construction after Atkinson, Donev and Tobias (2007),
  *Optimum Experimental Designs, with SAS*, Oxford: with the information matrix
  ``F = P^-1 + sum_i d_i d_i^T / (2 sigma^2)`` (``P`` the prior or last fit's covariance of the group
  C-factors; ``d_i`` the sensitivity of gauge i's drop, residual minus static, to each group's C), the
  D criterion adds the test that most increases ``log det F``; the A criterion the one that most
  lowers ``trace F^-1`` (the sum of the groups' variances). One test at a time, never revisited.
- A drop (static minus residual at the same gauge) carries twice the gauge variance and is free of
  the source grade at first order: the planner needs no tank levels.

Limits of each candidate test:

- one flowing hydrant, or two neighbouring ones (the nearest hydrant within ``mate_radius``, 900 ft
  by default: the next hydrant on the street, common practice) with the flow split between them as
  their outlets split it - the same outlets opened on each, so equal shares;
- flows a crew produces from standard outlets (``OUTLETS``): one or two 2.5 in hose outlets read by
  pitot at 10-30 psi (NFPA 291 asks for pitot readings in that band; Q = 29.83 c d^2 sqrt(p), c 0.90),
  or the 4.5 in pumper outlet through a flow meter (1,000-2,500 gpm); the test's total at most
  2,500 gpm (``FLOW_STEPS_GPM``); the pitot must stay at least ``PITOT_MARGIN_PSI`` below each
  flowing hydrant's own residual pressure (common practice);
- every junction at or above 20 psi plus ``margin`` during the test (NFPA 291: no residual below
  20 psi; the margin covers the model's error), a junction already below that at rest may not drop;
- gauges within ``radius`` of the flowing hydrant that drop at least ``MIN_DROP_PSI`` (a smaller drop
  is swamped by a 1 psi gauge), preferring drops of 10 psi or more (Walski 2000, JAWWA, "Model
  calibration data: the good, the bad and the useless", from memory);
- no hydrant serves in two tests of the plan (flowing or gauge).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp

from calib import units
from calib.errors import CalibrationError, ConvergenceError

GPM, PSI = units.GPM, units.PSI
PITOT = (10.0, 30.0)  # [psi] NFPA 291 band for pitot readings
PITOT_MARGIN_PSI = 5.0
HOSE_IN, HOSE_C = 2.5, 0.90
#: what a crew can open: (description, largest flow [gpm], number of hose outlets read by pitot or 0)
#: (hose outlets read by pitot first: the common kit; the pumper and a meter for larger flows)
OUTLETS = (("one 2.5 in hose outlet read by pitot", None, 1),
           ("two 2.5 in hose outlets read by pitot", None, 2),
           ("4.5 in pumper outlet through a flow meter", 2500.0, 0))
FLOW_STEPS_GPM = (2500.0, 2000.0, 1750.0, 1500.0, 1250.0, 1000.0, 750.0, 600.0)
MIN_DROP_PSI = 4.0
GOOD_DROP_PSI = 10.0  # Walski: a drop of 10 psi or more
LIMIT_PSI = 20.0  # NFPA 291


def hose_flow_gpm(pitot_psi: float, n: int) -> float:
    """NFPA 291: Q = 29.83 c d^2 sqrt(p) per outlet [gpm], d [in], p [psi], c = 0.90."""
    return n * 29.83 * HOSE_C * HOSE_IN ** 2 * np.sqrt(pitot_psi)


def outlet_for(flow_gpm: float, residual_psi: float):
    """The standard outlet set that gives ``flow_gpm`` at the flowing hydrant (or None): (text, pitot)."""
    for text, top, n in OUTLETS:
        if n == 0:
            if flow_gpm >= 1000.0 and flow_gpm <= top:
                return text, None
            continue
        pitot = (flow_gpm / hose_flow_gpm(1.0, n)) ** 2
        if PITOT[0] <= pitot <= PITOT[1] and pitot <= residual_psi - PITOT_MARGIN_PSI:
            return text, pitot
    return None


@dataclass
class PlannedTest:
    test_id: str
    flow_nodes: list
    flow: float  # [m3/s] the test's total
    outlets: str
    gauge_nodes: list
    expected_drop: list  # [Pa] per gauge
    aimed_at: str
    sd_before: float
    sd_after: float
    flow_split: list = field(default_factory=list)  # [m3/s] per flowing hydrant, as flow_nodes


@dataclass
class Plan:
    tests: list
    group_names: list
    sd_prior: np.ndarray
    sd_after: np.ndarray
    criterion: str
    notes: list = field(default_factory=list)


@dataclass
class Candidate:
    node: int  # the first flowing hydrant
    flow: float  # [m3/s] the test's total
    outlets: str
    drops: np.ndarray  # [Pa] per junction
    rows: np.ndarray  # (n_junctions x G) drop sensitivity / (sqrt(2) sigma) [1/unit C]
    gauges: np.ndarray  # eligible gauge junctions
    nodes: tuple = ()  # every flowing hydrant (the first, and its mate in a two-hydrant test)

    def __post_init__(self):
        self.nodes = tuple(int(n) for n in self.nodes) or (int(self.node),)

    @property
    def flows(self) -> dict:
        """Flow [m3/s] per flowing hydrant: equal shares (the same outlets opened on each)."""
        return {n: self.flow / len(self.nodes) for n in self.nodes}


class Planner:
    """Builds candidate tests on a network at given group C-factors and picks them greedily."""

    def __init__(self, network, grouping, c_group, solver=None, sigma: float = PSI, margin_psi: float = 5.0,
                 radius: float = 2000.0 * units.FT, hydrants=None, mate_radius: float = 900.0 * units.FT):
        from calib.hydraulics import NetworkSolver, Snapshot
        self.network, self.grouping = network, grouping
        self.solver = solver or NetworkSolver(network, headloss="hazen-williams")
        self.c = np.asarray(c_group, float)
        self.rough = grouping.per_pipe(self.c, network.roughness)
        self.sigma, self.margin, self.radius = float(sigma), float(margin_psi), float(radius)
        self.mate_radius = float(mate_radius)
        nj = network.n_junctions
        hyd = np.asarray(network.hydrant, bool)[:nj] if hydrants is None else None
        self.hydrants = (np.flatnonzero(hyd) if hyd is not None and hyd.any() else np.arange(nj)) \
            if hydrants is None else np.asarray(hydrants, dtype=np.int64)
        self._Snapshot = Snapshot
        self.rest = self.solver.solve(Snapshot(label="at rest"), roughness=self.rough)
        self.rest_p = np.asarray(self.rest.pressure, float)[:nj]
        self.rest_dH = self._dH(self.rest)
        self.floor = np.minimum(LIMIT_PSI + self.margin, self.rest_p / PSI) * PSI  # [Pa] per junction
        self.floor = np.where(self.rest_p < (LIMIT_PSI + self.margin) * PSI, self.rest_p - 0.5 * PSI, self.floor)

    def _dH(self, res) -> np.ndarray:
        """dH/dC per group at every junction (n_junctions x G)."""
        g = self.grouping
        sel = np.flatnonzero(g.index >= 0)
        n_links = self.network.n_pipes + len(self.network.pumps) + len(self.network.valves)
        dhdc = np.asarray(self.solver.dheadloss_droughness(res), float)
        dF1 = sp.csc_matrix((dhdc[sel], (sel, g.index[sel])), shape=(n_links, g.n_groups))
        dH, _ = self.solver.sensitivities(res, dF1, sp.csc_matrix((self.network.n_junctions, g.n_groups)))
        return dH.toarray() if sp.issparse(dH) else np.asarray(dH)

    def _solve(self, flows: dict):
        """The test's residual snapshot with ``flows`` {junction number: flow [m3/s]} drawn."""
        ids = self.network.node_ids
        snap = self._Snapshot(extra_demand={str(ids[int(n)]): float(f) for n, f in flows.items()},
                              label="candidate")
        return self.solver.solve(snap, roughness=self.rough, warm_start=self.rest)

    def mate(self, node: int) -> int | None:
        """The hydrant nearest ``node`` within ``mate_radius`` (map distance): its partner in a
        two-hydrant test; None when no hydrant is that near."""
        net, h = self.network, self.hydrants[self.hydrants != node]
        if h.size == 0:
            return None
        d = np.hypot(net.x[h] - net.x[node], net.y[h] - net.y[node])
        k = int(np.argmin(d))
        return int(h[k]) if d[k] <= self.mate_radius else None

    def candidate(self, node: int, mate: int | None = None) -> Candidate | None:
        """The largest standard flow at ``node`` (with ``mate`` flowing an equal share: a two-hydrant
        test) that keeps every limit, with its gauges' sensitivities; None when no flow does."""
        net = self.network
        nj = net.n_junctions
        nodes = (int(node),) if mate is None else (int(node), int(mate))
        d = np.hypot(net.x[self.hydrants] - net.x[node], net.y[self.hydrants] - net.y[node])
        near = self.hydrants[(d <= self.radius) & ~np.isin(self.hydrants, nodes)]
        if near.size == 0:
            return None
        for flow_gpm in FLOW_STEPS_GPM:
            q = flow_gpm * GPM
            try:
                res = self._solve({n: q / len(nodes) for n in nodes})
            except ConvergenceError:
                continue
            p = np.asarray(res.pressure, float)[:nj]
            if np.any(p < self.floor):
                continue
            # the same outlets on each flowing hydrant, each within its own residual pressure
            outlet = outlet_for(flow_gpm / len(nodes), float(p[list(nodes)].min()) / PSI)
            if outlet is None:
                continue
            drops = self.rest_p - p
            gauges = near[drops[near] >= MIN_DROP_PSI * PSI]
            if gauges.size == 0:
                return None
            rows = (self._dH(res) - self.rest_dH) / (np.sqrt(2.0) * units.pressure_to_head(self.sigma))
            text = outlet[0] + (f" at about {outlet[1]:.0f} psi" if outlet[1] else "")
            if len(nodes) > 1:
                text = f"on each of the {len(nodes)} hydrants: {text}"
            return Candidate(int(node), q, text, drops, rows, gauges, nodes)
        return None

    def candidates(self, pairs: bool = True, progress=None) -> list[Candidate]:
        """Every hydrant's one-hydrant test and, with ``pairs``, its two-hydrant test with its mate
        (each pair once), those that keep the limits."""
        out, seen = [], set()
        for k, node in enumerate(self.hydrants):
            c = self.candidate(int(node))
            if c is not None:
                out.append(c)
            m = self.mate(int(node)) if pairs else None
            if m is not None and frozenset((int(node), m)) not in seen:
                seen.add(frozenset((int(node), m)))
                c = self.candidate(int(node), m)
                if c is not None:
                    out.append(c)
            if progress is not None:
                progress(k + 1, len(self.hydrants))
        return out

    def plan(self, n_tests: int, P, criterion: str = "D", n_gauges: int = 2, progress=None,
             pairs: bool = True) -> Plan:
        """Greedy design of ``n_tests`` tests from the prior covariance ``P`` of the group C-factors
        (``pairs``: two-hydrant tests among the candidates)."""
        criterion = criterion.upper()
        if criterion not in ("D", "A"):
            raise CalibrationError(f"criterion '{criterion}' is not D or A")
        P = np.asarray(P, float)
        F = np.linalg.inv(P)
        names = list(self.grouping.names)
        cands = self.candidates(pairs, progress)
        singles = sum(len(c.nodes) == 1 for c in cands)
        notes = [f"{singles} of {len(self.hydrants)} hydrants can flow within the limits alone"
                 + (f", {len(cands) - singles} neighbouring pairs together" if pairs else "")]

        def score(Fn):
            if criterion == "D":
                return np.linalg.slogdet(Fn)[1]
            return -np.trace(np.linalg.inv(Fn))

        used: set[int] = set()
        chosen = []
        for t in range(n_tests):
            best = None
            for c in cands:
                if used.intersection(c.nodes):
                    continue
                pool = [int(g) for g in c.gauges if int(g) not in used]
                if not pool:
                    continue
                # gauges one by one, each the best given the ones already on; 10 psi drops preferred
                good = [g for g in pool if c.drops[g] >= GOOD_DROP_PSI * PSI]
                pool = good if len(good) >= n_gauges else pool
                Fc, picked = F.copy(), []
                for _ in range(min(n_gauges, len(pool))):
                    g = max((g for g in pool if g not in picked),
                            key=lambda g: score(Fc + np.outer(c.rows[g], c.rows[g])))
                    picked.append(g)
                    Fc = Fc + np.outer(c.rows[g], c.rows[g])
                s = score(Fc)
                if best is None or s > best[0]:
                    best = (s, c, picked, Fc)
            if best is None:
                notes.append(f"only {t} test(s) fit the limits with distinct hydrants")
                break
            _, c, picked, Fn = best
            sd_b = np.sqrt(np.diag(np.linalg.inv(F)))
            sd_a = np.sqrt(np.diag(np.linalg.inv(Fn)))
            g = int(np.argmax((sd_b - sd_a) / sd_b))
            ids = self.network.node_ids
            chosen.append(PlannedTest(f"P{t + 1:02d}", [str(ids[n]) for n in c.nodes], c.flow, c.outlets,
                                      [str(ids[k]) for k in picked], [float(c.drops[k]) for k in picked],
                                      names[g], float(sd_b[g]), float(sd_a[g]), list(c.flows.values())))
            used.update(list(c.nodes) + picked)
            F = Fn
        return Plan(chosen, names, np.sqrt(np.diag(P)), np.sqrt(np.diag(np.linalg.inv(F))), criterion, notes)


def posterior_sd(planner: Planner, P, tests) -> np.ndarray:
    """sd of each group after ``tests`` [(flow node, flow [m3/s], [gauge nodes])] by the same information;
    a test's flow node may be a {node: flow [m3/s]} dict (several flowing hydrants; its flow then unused)."""
    F = np.linalg.inv(np.asarray(P, float))
    for node, q, gauges in tests:
        res = planner._solve(node if isinstance(node, dict) else {int(node): float(q)})
        rows = (planner._dH(res) - planner.rest_dH) / (np.sqrt(2.0) * units.pressure_to_head(planner.sigma))
        for g in gauges:
            F = F + np.outer(rows[g], rows[g])
    return np.sqrt(np.diag(np.linalg.inv(F)))


def plan_frame(plan: Plan, system: str = "us"):
    import pandas as pd
    fu, pu = units.display_unit("flow", system), units.display_unit("pressure", system)
    return pd.DataFrame([{
        "test_id": t.test_id, "flow_nodes": ";".join(t.flow_nodes),
        f"flow [{fu}]": round(float(units.from_si(t.flow, "flow", fu)), 0),
        "gauge_nodes": ";".join(t.gauge_nodes),
        f"expected_drop [{pu}]": ";".join(f"{units.from_si(d, 'pressure', pu):.1f}" for d in t.expected_drop),
        "aimed_at": t.aimed_at, "sd_before": round(t.sd_before, 2), "sd_after": round(t.sd_after, 2),
        "outlets": t.outlets,
        f"flow_split [{fu}]": ";".join(f"{units.from_si(q, 'flow', fu):.0f}" for q in (t.flow_split or [t.flow]))}
        for t in plan.tests],
        columns=["test_id", "flow_nodes", f"flow [{fu}]", "gauge_nodes", f"expected_drop [{pu}]", "aimed_at",
                 "sd_before", "sd_after", "outlets", f"flow_split [{fu}]"])


def plan_geojson(plan: Plan, network, system: str = "us") -> dict:
    """Points for the map: each flowing and gauge hydrant with its test, role and order."""
    lu = units.display_unit("length", system)
    index = network.node_index
    feats = []
    for order, t in enumerate(plan.tests, start=1):
        for role, nodes in (("flow", t.flow_nodes), ("gauge", t.gauge_nodes)):
            for n in nodes:
                i = index[n]
                feats.append({"type": "Feature", "geometry": {"type": "Point", "coordinates": [
                    round(float(units.from_si(network.x[i], "length", lu)), 2),
                    round(float(units.from_si(network.y[i], "length", lu)), 2)]},
                    "properties": {"test_id": t.test_id, "order": order, "role": role, "node": n,
                                   "aimed_at": t.aimed_at, "flowing_hydrants": len(t.flow_nodes)}})
    return {"type": "FeatureCollection", "name": "test plan",
            "properties": {"coordinates": f"map grid [{lu}], as the network's x and y"}, "features": feats}
