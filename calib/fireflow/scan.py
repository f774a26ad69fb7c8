"""Fire flow available at one hydrant after another, from the steady-state model.

For a hydrant at junction i (SI inside: Pa gauge, m3/s):
- ``static``: its pressure in the loading of the scan (base demands x demand factor).
- ``flow_at_residual``: the draw at which its own pressure falls to the target residual. The junction
  is held at a fixed grade, elevation + residual / gamma (``Snapshot.held_head``), and one solve gives
  the draw: the node's inflow minus its own demand.
- ``flow_system``: the draw at which the lowest pressure at any *other* junction of its zone falls to
  the system minimum, and which junction that is (``limiting``). The zone (``ScanOptions.zones``)
  is by default the hydraulic zone of the static solution (``SolveResult.zone``: the part of the
  network fed by the same sources, split at active pressure-reducing, sustaining and flow-limiting
  valves, which hold the grade or flow beyond them); with ``zones="column"`` the junctions.csv
  ``zone`` column (a junction without one is checked against the whole network). Found by a short
  search: every junction's pressure drop from the static point is extrapolated as ``a_j Q^1.852``
  (the Hazen-Williams flow exponent, the same law as the 0.54 rating formula of NFPA 291) through
  the first solve, the smallest flow that brings one of them to the minimum is solved, and then
  each drop is extrapolated as ``a_j Q^n_j`` with a_j, n_j through the last two solves, until the
  lowest pressure is within ``pressure_tol`` of the minimum (2-3 solves).
  By default (``ScanOptions.system_search="binding"``) the search runs only where it can decide the
  available flow; see "When the search is skipped" below.
- ``available`` = the smaller of the two; its NFPA 291 class (``calib.flowtest.hydrant_class``).

With a C covariance (``GroupCovariance``), each flow also carries its gradient with respect to the
group C-factors by implicit differentiation at the converged state (``NetworkSolver.sensitivities``):
d(draw)/dC at the held solve; for the system flow ``dQ/dC = -(dH_j/dC) / (dH_j/dQ)`` at the limiting
junction j. The interval of the available flow is ``Q +/- z sqrt(g^T Cov g)`` (first-order
propagation of the covariance, e.g. JCGM 100:2008 (GUM), section 5.1.2).

When the search is skipped (the default, ``system_search="binding"``), and why that is exact:
every link of the model passes a flow from -> to that does not fall when the grade at its inlet
rises and does not rise when the grade at its outlet rises: pipes and minor losses (h(Q) increasing),
pumps on falling curves, check valves, and the control valves (a reducing valve's outlet grade is the
lower of its setting and what the inlet gives; a sustaining valve passes more as its inlet rises; a
flow-limiting valve caps the flow; a throttle is a fixed loss). The junctions' mass balance is then an
M-function of their heads, whose solution is antitone in the demands (Rheinboldt, W. C. (1970), "On
M-functions and their application to nonlinear Gauss-Seidel iterations and to network flows",
J. Math. Anal. Appl. 32, 274-307; from memory): a larger draw at the hydrant lowers no junction's
grade. The held solve *is* the state at the draw ``flow_at_residual`` = Q_r. So if there every other
junction of the zone is above the system minimum by more than ``pressure_tol``, it is higher still at
every draw below Q_r: the system-limited flow exceeds Q_r, the available flow is Q_r, its gradient
(interval) and class are those of the residual, and the hydrant limits itself. ``flow_system`` and
``limiting_node`` are then left empty, with a note. The full search (the same as
``system_search="always"``) runs in every other case: a junction of the zone at or within
``pressure_tol`` of the minimum at the held solve (the system limit binds, or nearly; its flow and
junction are then the full search's), or no held solve (static at or below the residual). The
checks in tests/fireflow/test_scan.py compare both modes on every hydrant of the demo town and of a
generated grid, the full search itself against scipy's brentq.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp

from calib.errors import CalibError, InputError
from calib.flowtest import hydrant_class
from calib.hydraulics import NetworkSolver, Snapshot
from calib.units import GAMMA_WATER, PSI

#: Hazen-Williams flow exponent: the pressure drop of a network fed by fixed grades grows about as
#: Q^1.852 (1/0.54, the NFPA 291 rating exponent).
DROP_EXPONENT = 1.852
#: Two-sided 95 % normal quantile (scipy.stats.norm.ppf(0.975) = 1.959964).
Z95 = 1.959964


#: Solver tolerances of a scan (heads to 0.1 mm, flows to 1e-6 of the largest): the figures are
#: reported to 1 gpm; measured to change them by under 0.001 % against the solver's defaults on
#: the benchmark grids, for about 12 % fewer Newton iterations.
SCAN_TOLERANCES = dict(head_tol=1e-4, flow_tol=1e-6, energy_tol=1e-4)


#: Where a hydrant's zone comes from (``ScanOptions.zones``), in words for the outputs.
ZONE_SOURCES = {
    "hydraulic": "hydraulic zones of the static solution (fed by the same sources; split at active "
                 "pressure-reducing, sustaining and flow-limiting valves)",
    "column": "the junctions' zone column (the whole network for a junction without one)",
}


@dataclass(frozen=True)
class ScanOptions:
    """What a scan asks (SI): target residual at the hydrant and minimum anywhere else in its zone
    [Pa gauge], the demand factor [-]; the system search stops when the lowest pressure is within
    ``pressure_tol`` [Pa] of the minimum or the next flow step is below ``flow_rtol`` (relative),
    after at most ``max_search`` solves.

    ``system_search``: ``"binding"`` (default) searches the system-limited flow only where it can
    limit the available flow: it is skipped when the held solve already shows every other junction
    of the zone above the system minimum (exact: see the module's "When the search is skipped");
    ``available``, its interval, class and what limits it are the same as with ``"always"``, which
    searches at every hydrant and so also fills ``flow_system`` where it is larger than the flow at
    the residual. Binding saves 1-3 solves per hydrant where the search is skipped.

    ``zones``: ``"hydraulic"`` (default: the static solution's pressure zones, split by control
    valves) or ``"column"`` (the junctions' ``zone`` column as given in junctions.csv)."""

    residual: float = 20 * PSI
    system_minimum: float = 20 * PSI
    demand_factor: float = 1.0
    pressure_tol: float = 0.02 * PSI
    flow_rtol: float = 2e-4
    max_search: int = 12
    system_search: str = "binding"
    zones: str = "hydraulic"

    def check(self) -> None:
        if self.zones not in ZONE_SOURCES:
            raise InputError(f"zones '{self.zones}' is not known", field="--zones",
                             expected=" or ".join(ZONE_SOURCES))
        if self.system_search not in ("always", "binding"):
            raise InputError(f"system search '{self.system_search}' is not known",
                             field="--system-search", expected="always or binding")
        for name, v in (("residual", self.residual), ("system_minimum", self.system_minimum)):
            if not (math.isfinite(v) and 0 <= v <= 200 * PSI):
                raise InputError(f"{name.replace('_', ' ')} {v / PSI:.4g} psi is not plausible",
                                 field=f"--{name.replace('_', '-')}",
                                 expected="a gauge pressure from 0 to 200 psi, usually 20 psi")
        f = self.demand_factor
        if not (math.isfinite(f) and 0 <= f <= 10):
            raise InputError(f"demand factor {f} is not plausible", field="--demand-factor",
                             expected="a number from 0 to 10, e.g. 1.0 (average day) or 1.5")


@dataclass
class GroupCovariance:
    """C covariance of the calibration groups and each pipe's group (-1: in no group, C fixed).

    ``cov`` (g x g); ``undetermined`` (g,) groups with no finite variance; ``c`` their fitted C."""

    names: list
    cov: np.ndarray
    pipe_group: np.ndarray
    undetermined: np.ndarray
    c: np.ndarray | None = None

    @property
    def n_groups(self) -> int:
        return len(self.names)


@dataclass
class HydrantFlow:
    """One hydrant's figures [SI]; nan where a figure does not exist, with the reason in ``note``."""

    node: str
    static: float
    flow_at_residual: float
    flow_system: float
    limiting_node: str
    available: float
    grad_residual: np.ndarray | None = None  # d flow_at_residual / d C_group [m3/s per unit C]
    grad_system: np.ndarray | None = None
    sd: float = math.nan  # standard deviation of available from the C covariance [m3/s]
    low: float = math.nan
    high: float = math.nan
    note: str = ""
    zone: str = ""  # the zone checked against the system minimum ('' : the whole network)
    solves: int = 0
    notes: list = field(default_factory=list)

    @property
    def hydrant_class(self) -> str:
        if not math.isfinite(self.available):
            return ""
        return hydrant_class(max(self.available, 0.0)).label


class FireFlowScan:
    """The state shared by every hydrant of one scan: solver, static solution, zones, groups."""

    def __init__(self, network, roughness=None, options: ScanOptions | None = None,
                 covariance: GroupCovariance | None = None, solver: NetworkSolver | None = None,
                 static_start=None):
        """``static_start``: a warm start for the static solve (a solution of a loading like the
        scan's, e.g. a fit's static snapshot: ``fitsummary``), else a cold start."""
        self.network = net = network
        self.options = options or ScanOptions()
        self.options.check()
        self.roughness = None if roughness is None else np.asarray(roughness, dtype=float)
        self.covariance = covariance
        self.solver = solver or NetworkSolver(net, **SCAN_TOLERANCES)
        self.base = Snapshot(demand_factor=self.options.demand_factor, label="fire flow static")
        self.static = self.solver.solve(self.base, roughness=self.roughness,
                                        warm_start=static_start)
        self.solves = 1
        nj = net.n_junctions
        self.p0 = self.static.pressure[:nj]
        self.iso = self.static._isolated_mask[:nj].copy()
        if self.options.zones == "hydraulic" and self.static.zone is not None:
            zone = np.asarray(self.static.zone[:nj]).astype(str)  # '' where cut off
        else:
            zone = np.asarray(net.zone[:nj]).astype(str)
        self.zone_source = ZONE_SOURCES[self.options.zones]
        self._zone = zone
        self._zone_members = {z: np.flatnonzero((zone == z) & ~self.iso) for z in set(zone) if z}
        self._all = np.flatnonzero(~self.iso)
        # junction adjacency, for warm starts from a neighbouring hydrant's held solve
        f, t = self.solver.link_from, self.solver.link_to
        inner = (f < nj) & (t < nj)
        adj = sp.csr_matrix((np.ones(2 * int(inner.sum())),
                             (np.concatenate([f[inner], t[inner]]),
                              np.concatenate([t[inner], f[inner]]))), shape=(nj, nj))
        self._adjacency = adj
        self.last_held = None  # (junction, SolveResult) of the last held solve; see reset()
        if covariance is not None:
            g = np.asarray(covariance.pipe_group)
            sel = g >= 0
            # pipe -> group incidence (n_links x groups), scaled per pipe by dh/dC at each solution
            self._group_of = sp.csr_matrix((np.ones(int(sel.sum())), (np.flatnonzero(sel), g[sel])),
                                           shape=(len(self.solver.link_from),  # with valves
                                                  covariance.n_groups))

    # --- per hydrant -------------------------------------------------------------------------
    def zone_name(self, i: int) -> str:
        """The zone of junction i as the scan uses it ('' for none: the whole network)."""
        return str(self._zone[i])

    def zone_of(self, i: int) -> np.ndarray:
        """Junctions checked against the system minimum for hydrant i (its zone, itself excluded)."""
        z = self._zone[i]
        members = self._zone_members.get(z, self._all) if z else self._all
        return members[members != i]

    def hydrant(self, node: str, start=None) -> HydrantFlow:
        """All figures for the hydrant at junction ``node``. ``start``: a warm start for its held
        solve (a solution whose flows are near the held state's, e.g. one a flow test there gave:
        ``fitsummary.held_start``), else a neighbour's held solve, else a cold start."""
        net, opt = self.network, self.options
        i = net.node_index.get(str(node))
        if i is None or i >= net.n_junctions:
            raise InputError(f"'{node}' is not a junction of the network", id=str(node),
                             field="--nodes", expected="junction ids")
        out = HydrantFlow(node=str(node), static=float(self.p0[i]), flow_at_residual=math.nan,
                          flow_system=math.nan, limiting_node="", available=math.nan,
                          zone=self.zone_name(i))
        if self.iso[i]:
            out.note = "cut off from every source by closed pipes: no fire flow"
            out.flow_at_residual = out.flow_system = out.available = 0.0
            return out
        held = self._at_residual(i, out, start)
        self._system(i, out, held)
        self._combine(out)
        return out

    def _solve(self, snapshot, warm):
        self.solves += 1
        return self.solver.solve(snapshot, roughness=self.roughness, warm_start=warm)

    def _at_residual(self, i, out, start=None):
        net, opt = self.network, self.options
        if self.p0[i] <= opt.residual:
            out.flow_at_residual = 0.0
            out.notes.append("static pressure at or below the residual target")
            if self.covariance is not None:
                out.grad_residual = np.zeros(self.covariance.n_groups)
            return None
        grade = net.elevation[i] + opt.residual / GAMMA_WATER
        snap = Snapshot(demand_factor=opt.demand_factor, held_head={net.node_ids[i]: grade},
                        label=f"fire flow held {net.node_ids[i]}")
        # warm start from a neighbour's held solve (2 pipes away at most): measured 6.3 Newton
        # iterations and 4.2 factorizations against 8.1 and 6.5 from a cold start (secant first
        # step); the static flows are a worse start (12-13: their near-zero slopes at the hydrant
        # overshoot the first step). Results differ between starts only within the tolerances.
        res = self._solve(snap, start if start is not None else self._neighbour_start(i))
        self.last_held = (i, res)
        out.flow_at_residual = float(next(iter(res.held_flow.values())))
        if self.covariance is not None:
            _, dQ = self._sensitivity(res, extra_demand_at=None)
            out.grad_residual = self.solver.pattern.inflow_matrix(dQ)[i]
        return res

    def _system(self, i, out, held):
        """Short search for the draw at which the zone's lowest pressure reaches the minimum."""
        net, opt = self.network, self.options
        zone = self.zone_of(i)
        if len(zone) == 0:
            out.notes.append("no other junction in its zone: no system limit")
            return
        target = opt.system_minimum
        p0 = self.p0[zone]
        if p0.min() <= target:
            j = zone[np.argmin(p0)]
            out.flow_system, out.limiting_node = 0.0, str(net.node_ids[j])
            out.notes.append(f"{net.node_ids[j]} is at or below the system minimum with no fire flow")
            if self.covariance is not None:
                out.grad_system = np.zeros(self.covariance.n_groups)
            return
        if (opt.system_search == "binding" and held is not None and out.flow_at_residual > 0
                and held.pressure[zone].min() > target + opt.pressure_tol):
            out.notes.append("system limit not searched: every other junction of the zone stays "
                             "above the system minimum at the flow at residual, so it is larger")
            return
        # first point: the held solve when there is one, else a 1000 gpm draw
        if held is not None and out.flow_at_residual > 0:
            q, res = out.flow_at_residual, held
        else:
            q = 0.0631
            res = self._solve(self._draw(i, q), self.static)
        # Each junction's drop from its static pressure as a power law a_j Q^n_j: first with the
        # Hazen-Williams n = 1.852 through the first solve, then with a_j and n_j through the last
        # two solves (a secant in log Q, log drop). The smallest Q at which one of them reaches
        # the minimum is the next draw. Every junction's law, not only the one lowest now: the
        # limit often passes between far junctions as the draw grows.
        last = None  # (Q, drops) of the previous solve
        for _ in range(opt.max_search):
            p = res.pressure[zone]
            k = int(np.argmin(p))
            if abs(p[k] - target) <= opt.pressure_tol:
                break
            drop = np.maximum(p0 - p, 1e-9 * PSI)
            q_new = self._next_draw(q, drop, last, p0 - target)
            last = (q, drop)
            if abs(q_new - q) <= opt.flow_rtol * q:
                break
            res = self._solve(self._draw(i, q_new), self._scaled(res, q, q_new))
            q = q_new
        else:
            raise CalibError(f"hydrant {net.node_ids[i]}: the system-minimum search did not settle "
                             f"in {opt.max_search} solves (lowest pressure "
                             f"{res.pressure[zone].min() / PSI:.2f} psi for {target / PSI:.2f})")
        j = zone[k]
        out.flow_system, out.limiting_node = q, str(net.node_ids[j])
        if self.covariance is not None:
            dH, _ = self._sensitivity(res, extra_demand_at=i)
            dHdq = dH[j, -1]
            out.grad_system = -dH[j, :-1] / dHdq if dHdq != 0 else np.full(dH.shape[1] - 1, np.nan)

    @staticmethod
    def _next_draw(q, drop, last, room):
        """Smallest draw at which a junction's drop ``a Q^n`` reaches its ``room`` (static minus
        the minimum) [Pa]: n = 1.852 through (q, drop), or n from the two solves (last, this) when
        both moved the junction (n kept within 1-3 where the two points are too close to say)."""
        n = np.full(len(drop), DROP_EXPONENT)
        if last is not None and last[0] != q:
            q0, d0 = last
            with np.errstate(divide="ignore", invalid="ignore"):
                fitted = np.log(drop / d0) / math.log(q / q0)
            n = np.where(np.isfinite(fitted), np.clip(fitted, 1.0, 3.0), n)
        return float(np.min(q * (room / drop) ** (1.0 / n)))

    def reset(self) -> None:
        """Forget the last held solve (a batch starts from the same state wherever it runs)."""
        self.last_held = None

    def _neighbour_start(self, i):
        if self.last_held is None:
            return None
        j, res = self.last_held
        near = self._adjacency[i].indices
        if j == i or j in near or j in self._adjacency[near].indices:
            return res
        return None

    def _scaled(self, res, q, q_new):
        """A warm start for a draw of ``q_new`` from a solution at ``q``: the flows' change from
        the static state scaled by the draw (close when the flow pattern keeps its shape)."""
        base = self.static
        k = q_new / q if q > 0 else 1.0
        flow = base.flow + k * (res.flow - base.flow)
        pump = base.pump_flow + k * (res.pump_flow - base.pump_flow)
        return dataclasses.replace(res, flow=flow, pump_flow=pump)

    def _draw(self, i, q):
        return Snapshot(demand_factor=self.options.demand_factor,
                        extra_demand={self.network.node_ids[i]: q},
                        label=f"fire flow draw {self.network.node_ids[i]}")

    def _sensitivity(self, res, extra_demand_at):
        """dH, dQ for the group C-factors (and the draw at one junction as a last column)."""
        solver = self.solver
        dh = solver.dheadloss_droughness(res)
        per_link = np.concatenate([dh, np.zeros(len(solver.link_from) - len(dh))])  # pumps, valves: 0
        dF1 = sp.diags(per_link) @ self._group_of
        nj = self.network.n_junctions
        dF2 = sp.csr_matrix((nj, self.covariance.n_groups))
        if extra_demand_at is not None:
            dF1 = sp.hstack([dF1, sp.csr_matrix((dF1.shape[0], 1))])
            col = np.zeros((nj, 1))
            col[extra_demand_at] = -1.0  # F2_i = inflow - d_i
            dF2 = sp.hstack([dF2, sp.csr_matrix(col)])
        return solver.sensitivities(res, dF1.tocsr(), dF2.tocsr())

    def _combine(self, out):
        a, b = out.flow_at_residual, out.flow_system
        if math.isnan(b):
            out.available, grad = a, out.grad_residual
        elif b < a:
            out.available, grad = b, out.grad_system
        else:
            out.available, grad = a, out.grad_residual
        if self.covariance is not None and grad is not None:
            self._interval(out, np.asarray(grad, dtype=float))
        out.note = "; ".join(out.notes)

    def _interval(self, out, grad):
        cov = self.covariance
        weight = np.abs(grad) > 1e-12 * max(1.0, np.abs(grad).max(initial=0.0))
        blind = weight & cov.undetermined
        if blind.any():
            names = ", ".join(str(cov.names[k]) for k in np.flatnonzero(blind))
            out.notes.append(f"no interval: depends on undetermined group(s) {names}")
            return
        g = np.where(weight, grad, 0.0)
        c = np.nan_to_num(cov.cov, nan=0.0, posinf=0.0)
        var = float(g @ c @ g)
        out.sd = math.sqrt(max(var, 0.0))
        out.low = max(out.available - Z95 * out.sd, 0.0)
        out.high = out.available + Z95 * out.sd


def locality_order(network, nodes) -> list[str]:
    """``nodes`` reordered so that neighbours follow each other (reverse Cuthill-McKee ordering of
    the junction graph, scipy.sparse.csgraph), for warm starts from the previous hydrant."""
    from scipy.sparse.csgraph import reverse_cuthill_mckee
    nj = network.n_junctions
    f, t = network.pipe_from, network.pipe_to
    inner = (f < nj) & (t < nj)
    adj = sp.csr_matrix((np.ones(int(inner.sum())), (f[inner], t[inner])), shape=(nj, nj))
    rank = np.empty(nj, dtype=np.int64)
    rank[reverse_cuthill_mckee(adj, symmetric_mode=False)] = np.arange(nj)
    index = network.node_index
    return sorted(nodes, key=lambda n: rank[index[n]])


def hydrant_nodes(network, choice: str = "hydrants") -> list[str]:
    """Junction ids to scan: ``"hydrants"`` (the junctions marked as hydrants), ``"all"`` junctions,
    or a comma-separated list of ids (every id checked)."""
    nj = network.n_junctions
    text = str(choice).strip()
    if text.lower() == "hydrants":
        ids = [str(k) for k in network.node_ids[:nj][np.asarray(network.hydrant, bool)]]
        if not ids:
            raise InputError("no junction is marked as a hydrant", field="--nodes",
                             expected="a hydrant column with yes on some junctions, or --nodes all "
                                      "or a list of ids")
        return ids
    if text.lower() == "all":
        return [str(k) for k in network.node_ids[:nj]]
    ids = [t.strip() for t in text.split(",") if t.strip()]
    bad = [k for k in ids if network.node_index.get(k, nj) >= nj]
    if bad or not ids:
        raise InputError(f"not junctions of the network: {', '.join(bad[:10]) or '(none given)'}",
                         field="--nodes", expected="all, hydrants, or junction ids separated by commas")
    return list(dict.fromkeys(ids))
