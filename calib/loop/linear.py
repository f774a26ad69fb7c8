"""One flow test as the check, the closure search and the planner see it: readings, and a linearization.

``TestReadings`` holds one test's flows, source grades and gauge readings as grades [m] (plain SI).
``Linearizer.at(state)`` solves the test's static and residual snapshots at a state
``[C per group, grade per source, flow scale]`` and returns the simulated grade at each reading with
its Jacobian, from implicit differentiation of the global gradient equations (Todini and Pilati 1988;
``NetworkSolver.sensitivities``):

- ``dF1_k/dC_g = dh_k/dC_k`` for the pipes k of group g (Hazen-Williams: ``-1.852 h_k / C_k``);
- ``dF1_k/dH_s = -1`` where ``from_k = s``, ``+1`` where ``to_k = s`` (a source's grade);
- ``dF2_i/dk = -q_i`` at the flowing nodes for the flow scale k (the test's flows are ``k q``).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp

from calib import units
from calib.calibration.tests_io import GaugeGrades


@dataclass
class TestReadings(GaugeGrades):
    """One test: flows, noted source grades, and readings (structure of arrays, SI)."""

    __test__ = False  # not a pytest class

    test_id: str
    flows: dict  # node number -> flow [m3/s]
    source_head: dict  # source node number -> grade noted at the test [m]
    node: np.ndarray  # (n,) node number of each reading
    kind: np.ndarray  # (n,) "static" | "residual"
    pressure: np.ndarray  # (n,) observed gauge pressure [Pa]
    gauge_height: np.ndarray  # (n,) gauge above the node [m]
    sigma: np.ndarray  # (n,) stated gauge accuracy [Pa]
    elevation: np.ndarray  # (n,) node elevation [m]
    date: str = ""
    rows: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))  # in the TestSet

    def head_to_gauge(self, head) -> np.ndarray:
        """Grade [m] at each reading's node -> what its gauge reads [Pa]."""
        return units.head_to_pressure(np.asarray(head, float) - self.elevation - self.gauge_height)

    def gauges(self) -> list[int]:
        """Gauge nodes in the order first read."""
        out: list[int] = []
        for n in self.node.tolist():
            if n not in out:
                out.append(int(n))
        return out


def split_tests(tests) -> list[TestReadings]:
    """A ``TestSet`` as one ``TestReadings`` per test, in the order taken: tests.csv date, else test id."""
    dates = {}
    info = getattr(tests, "info", None)
    if info is not None and len(info) and "test_id" in info.columns and "date" in info.columns:
        for tid, d in zip(info["test_id"].astype(str), info["date"]):
            dates[tid.strip()] = "" if d is None or str(d) == "nan" else str(d).strip()
    out = []
    for t, tid in enumerate(tests.test_ids):
        rows = np.flatnonzero(tests.test == t)
        if rows.size == 0:
            continue
        out.append(TestReadings(
            test_id=str(tid), flows=dict(tests.flows[t]), source_head=dict(tests.source_head[t]),
            node=tests.node[rows].astype(np.int64), kind=tests.kind[rows].astype(object),
            pressure=tests.pressure[rows].astype(float), gauge_height=tests.gauge_height[rows].astype(float),
            sigma=tests.sigma[rows].astype(float), elevation=tests.elevation[rows].astype(float),
            date=dates.get(str(tid), ""), rows=rows))
    # dated tests first in date order (ISO dates sort as text), then undated ones by id
    return sorted(out, key=lambda r: (r.date == "", r.date, r.test_id))


class Linearizer:
    """Solves one test at a state and gives the grades at its readings with their Jacobian.

    State layout: ``[C_1..C_G, H_1..H_S, k]`` - group C-factors, source grades [m], flow scale [-].
    """

    def __init__(self, network, grouping, solver=None):
        from calib.hydraulics import NetworkSolver
        self.network, self.grouping = network, grouping
        self.solver = solver or NetworkSolver(network, headloss="hazen-williams")
        self.G, self.S = grouping.n_groups, network.n_sources
        nj = network.n_junctions
        self.n_links = network.n_pipes + len(network.pumps) + len(network.valves)  # solver links
        link_from = np.concatenate([network.pipe_from, network.pumps.from_node]).astype(np.int64)
        link_to = np.concatenate([network.pipe_to, network.pumps.to_node]).astype(np.int64)
        rows, cols, vals = [], [], []
        for s in range(self.S):
            node = nj + s
            for links, v in ((np.flatnonzero(link_from == node), -1.0), (np.flatnonzero(link_to == node), 1.0)):
                rows.append(links)
                cols.append(np.full(len(links), self.G + s))
                vals.append(np.full(len(links), v))
        self._src = (np.concatenate(rows) if rows else np.zeros(0, int),
                     np.concatenate(cols) if cols else np.zeros(0, int),
                     np.concatenate(vals) if vals else np.zeros(0))
        self.grouped = np.flatnonzero(grouping.index >= 0)
        self.n_state = self.G + self.S + 1
        self._warm: dict = {}
        self._memo: dict = {}  # (test, state) -> (h, J or None): the same point is often asked twice

    def nominal(self, c_group, test: TestReadings) -> np.ndarray:
        """The state with ``c_group``, the test's noted source grades (else the network's) and flow scale 1."""
        net = self.network
        heads = np.array(net.source_head, float).copy()
        for s, h in test.source_head.items():
            heads[int(s) - net.n_junctions] = float(h)
        return np.concatenate([np.asarray(c_group, float), heads, [1.0]])

    def roughness(self, c_group) -> np.ndarray:
        return self.grouping.per_pipe(c_group, self.network.roughness)

    def solve(self, state, test: TestReadings, kind: str, roughness=None, warm=None):
        """The ``SolveResult`` of one snapshot (``"static"`` or ``"residual"``) at ``state``."""
        from calib.hydraulics import Snapshot
        net = self.network
        state = np.asarray(state, float)
        heads = {str(net.source_ids[s]): float(state[self.G + s]) for s in range(self.S)}
        extra = {}
        if kind == "residual":
            k = float(state[-1])
            extra = {str(net.node_ids[n]): k * float(q) for n, q in test.flows.items()}
        snap = Snapshot(extra_demand=extra, source_head=heads, label=f"{test.test_id} {kind}")
        rough = self.roughness(state[: self.G]) if roughness is None else roughness
        key = (test.test_id, kind)
        if warm is not None:  # a given start (e.g. the open network for a closed pipe): kept as is
            return self.solver.solve(snap, roughness=rough, warm_start=warm)
        res = self.solver.solve(snap, roughness=rough, warm_start=self._warm.get(key))
        self._warm[key] = res
        return res

    def at(self, state, test: TestReadings, roughness=None, jacobian: bool = True, warm=None):
        """Simulated grade [m] at each reading and (n_readings x n_state) Jacobian at ``state``."""
        state = np.asarray(state, float)
        key = (test.test_id, state.tobytes()) if roughness is None else None
        if key is not None and key in self._memo and (self._memo[key][1] is not None or not jacobian):
            h, J = self._memo[key]
            return (h.copy(), J.copy()) if jacobian else h.copy()
        h = np.zeros(len(test.node))
        J = np.zeros((len(test.node), self.n_state))
        for kind in ("static", "residual"):
            rows = np.flatnonzero(test.kind == kind)
            if rows.size == 0:
                continue
            res = self.solve(state, test, kind, roughness, None if warm is None else warm.get(kind))
            h[rows] = np.asarray(res.head, float)[test.node[rows]]
            if jacobian:
                dH = self.sensitivities(res, test, kind)
                J[rows] = dH[test.node[rows]]
        if key is not None:
            if len(self._memo) > 64:
                self._memo.clear()
            self._memo[key] = (h.copy(), J.copy() if jacobian else None)
        return (h, J) if jacobian else h

    def sensitivities(self, res, test: TestReadings, kind: str) -> np.ndarray:
        """dH/d state at every junction (n_junctions x n_state) for one solved snapshot."""
        net, p = self.network, self.n_state
        nj = net.n_junctions
        dhdc = np.asarray(self.solver.dheadloss_droughness(res), float)
        r0, c0, v0 = self._src
        rows = np.concatenate([self.grouped, r0])
        cols = np.concatenate([self.grouping.index[self.grouped], c0])
        vals = np.concatenate([dhdc[self.grouped], v0])
        dF1 = sp.csc_matrix((vals, (rows, cols)), shape=(self.n_links, p))
        if kind == "residual" and test.flows:
            nodes = np.array(list(test.flows), dtype=np.int64)
            q = np.array([test.flows[n] for n in nodes], float)
            dF2 = sp.csc_matrix((-q, (nodes, np.full(len(nodes), p - 1))), shape=(nj, p))
        else:
            dF2 = sp.csc_matrix((nj, p))
        dH, _ = self.solver.sensitivities(res, dF1, dF2)
        dH = dH.toarray() if sp.issparse(dH) else np.asarray(dH)
        full = np.zeros((net.n_nodes, p))
        full[:nj] = dH
        for s in range(self.S):  # a source's own grade moves one for one
            full[nj + s, self.G + s] = 1.0
        return full
