"""K snapshots of one network solved as one: the block-diagonal network of K disjoint copies.

Copy k of the network keeps its own junctions (numbers ``k * nj + i``), sources
(``K * nj + k * ns + s``), pipes, pumps and valves; no link joins two copies, so the Newton system
of the stack is block diagonal and each block is exactly the system of that copy's own solve. One
stacked solve thus does the work of K solves with the Python overhead of one (on small networks the
solver's time is almost all per-iteration Python work, not the factorization of a few hundred
junctions), and one ``NetworkSolver.sensitivities`` call gives every copy's derivatives.

Used by ``calib.calibration.problem`` for the snapshots of a fit. What changes against K separate
solves: the stack iterates until its slowest copy has converged (the others take extra, exact
Newton steps), and the solver's relative tolerances (flow change and mass balance, relative to the
total demand) are scaled down so that every copy is held to at least the accuracy it would have
alone (``StackedSolver``); the stack also stops as soon as every copy meets the solver's rule with
its own reference flow and total demand at the unscaled tolerances (``StackedNetwork.settled``):
the accuracy each copy has alone, without the stack-wide rule's extra steps. The status logic is
the solver's own, unchanged.
Not here: the snapshots' contents (``problem``), the solver's internals.
"""

from __future__ import annotations

import re
import weakref

import numpy as np

from calib.hydraulics.result import SolveResult
from calib.hydraulics.snapshot import Snapshot, resolve
from calib.network.model import Network, Pumps, Valves

#: Separator between an id and its copy number in the stacked network's ids ("J12@3").
SEP = "@"


def _copies(text: str) -> set[str]:
    """Copy numbers of the stacked ids named in a message."""
    return set(re.findall(rf"{SEP}(\d+)(?!\d)", text))


def _tile(a, k):
    a = np.asarray(a)
    return np.concatenate([a] * k) if k else a[:0]


class StackedNetwork:
    """``k`` disjoint copies of ``network`` as one ``Network`` (``self.network``), with the index
    maps between a copy and the stack (all ``(k, n)`` int arrays of stacked numbers):
    ``node_map`` (nodes, junctions then sources), ``pipe_map``, ``link_map`` (the solver's link
    order: pipes, pumps, valves)."""

    def __init__(self, network: Network, k: int):
        if k < 1:
            raise ValueError(f"a stack needs at least one copy, got {k}")
        net = network
        self.base, self.k = net, int(k)
        nj, ns, npp = net.n_junctions, net.n_sources, net.n_pipes
        nu, nv = len(net.pumps), len(net.valves)
        self.nj, self.ns, self.np_, self.nu, self.nv = nj, ns, npp, nu, nv
        copies = np.arange(k)[:, None]
        jn = copies * nj + np.arange(nj)[None, :]
        sn = k * nj + copies * ns + np.arange(ns)[None, :]
        self.node_map = np.concatenate([jn, sn], axis=1).astype(np.int64)
        self.junction_map = jn.astype(np.int64)
        self.source_map = sn.astype(np.int64)
        self.pipe_map = (copies * npp + np.arange(npp)[None, :]).astype(np.int64)
        pump_map = k * npp + copies * nu + np.arange(nu)[None, :]
        valve_map = k * (npp + nu) + copies * nv + np.arange(nv)[None, :]
        self.pump_map, self.valve_map = pump_map.astype(np.int64), valve_map.astype(np.int64)
        self.link_map = np.concatenate([self.pipe_map, self.pump_map, self.valve_map], axis=1)
        node = self.node_map  # original node number -> stacked, per copy

        def ids(a):  # "id@c" for every copy c, copy-major
            return np.array([f"{i}{SEP}{c}" for c in range(k) for i in np.asarray(a).astype(str)],
                            dtype=object)

        node_ids = np.concatenate([ids(net.junction_ids), ids(net.source_ids)])
        self._node_names = node_ids
        self.network = Network(
            node_ids=node_ids, n_junctions=k * nj,
            elevation=np.concatenate([_tile(net.elevation[:nj], k), _tile(net.elevation[nj:], k)]),
            demand=_tile(net.demand, k), source_head=_tile(net.source_head, k),
            pipe_ids=ids(net.pipe_ids),
            pipe_from=node[copies, net.pipe_from[None, :]].ravel(),
            pipe_to=node[copies, net.pipe_to[None, :]].ravel(),
            length=_tile(net.length, k), diameter=_tile(net.diameter, k),
            roughness=_tile(net.roughness, k), minor_loss=_tile(net.minor_loss, k),
            status=_tile(net.status, k), roughness_height=_tile(net.roughness_height, k),
            group=_tile(net.group, k), material=_tile(net.material, k),
            installed=_tile(net.installed, k), source_kind=_tile(net.source_kind, k),
            source_floor=_tile(net.source_floor, k),
            source_level_max=_tile(net.source_level_max, k), hydrant=_tile(net.hydrant, k),
            x=np.concatenate([_tile(net.x[:nj], k), _tile(net.x[nj:], k)]),
            y=np.concatenate([_tile(net.y[:nj], k), _tile(net.y[nj:], k)]),
            zone=np.concatenate([_tile(net.zone[:nj], k), _tile(net.zone[nj:], k)]),
            pumps=Pumps(ids=ids(net.pumps.ids),
                        from_node=node[copies, np.asarray(net.pumps.from_node, np.int64)[None, :]].ravel(),
                        to_node=node[copies, np.asarray(net.pumps.to_node, np.int64)[None, :]].ravel(),
                        shutoff_head=_tile(net.pumps.shutoff_head, k),
                        curve_r=_tile(net.pumps.curve_r, k), curve_n=_tile(net.pumps.curve_n, k),
                        speed=_tile(net.pumps.speed, k)),
            valves=Valves(ids=ids(net.valves.ids),
                          from_node=node[copies, net.valves.from_node[None, :]].ravel(),
                          to_node=node[copies, net.valves.to_node[None, :]].ravel(),
                          diameter=_tile(net.valves.diameter, k), kind=_tile(net.valves.kind, k),
                          setting=_tile(net.valves.setting, k), mode=_tile(net.valves.mode, k),
                          minor_loss=_tile(net.valves.minor_loss, k)),
            name=f"{net.name} x {k}")
        # stacked id -> original id, for the names a result carries (zones, notes, held draws)
        self._zone_memo: dict = {}
        #: (flow_tol, mass_tol) of one network alone, for ``settled`` (set by ``StackedSolver``)
        self.tolerances = (1e-8, 1e-8)
        self._link_ids = np.concatenate([net.pipe_ids, np.asarray(net.pumps.ids, dtype=object),
                                         net.valves.ids]).astype(str)
        self._junction_ids = np.asarray(net.node_ids[:nj]).astype(str)
        self._original = {}
        for c in range(k):
            for arr, stacked in ((net.node_ids, self.node_ids_of(c)),
                                 (np.asarray(net.valves.ids, dtype=object),
                                  self.network.valves.ids[self.valve_map[c] - k * (npp + nu)])):
                self._original.update(zip(map(str, stacked), map(str, arr)))

    def node_ids_of(self, c: int) -> np.ndarray:
        return self._node_names[self.node_map[c]]

    def name(self, c: int, node_id) -> str:
        """Stacked id of original node (or valve) ``node_id`` in copy ``c``."""
        return f"{node_id}{SEP}{c}"

    # --- loadings ----------------------------------------------------------------------------
    def snapshot(self, snaps, label: str = "stack") -> Snapshot:
        """One ``Snapshot`` of the stack from one per copy; they must share ``demand_factor`` (it
        scales every base demand of the stack)."""
        if len(snaps) != self.k:
            raise ValueError(f"{len(snaps)} snapshots for a stack of {self.k} copies")
        factors = {float(s.demand_factor) for s in snaps}
        if len(factors) > 1:
            raise ValueError(f"the snapshots of one stack must share their demand factor, "
                             f"got {sorted(factors)}")
        extra, heads, held = {}, {}, {}
        for c, s in enumerate(snaps):
            extra.update({self.name(c, n): v for n, v in s.extra_demand.items()})
            heads.update({self.name(c, n): v for n, v in s.source_head.items()})
            held.update({self.name(c, n): v for n, v in (s.held_head or {}).items()})
        return Snapshot(demand_factor=factors.pop(), extra_demand=extra, source_head=heads,
                        held_head=held, label=label)

    def roughness(self, per_copy) -> np.ndarray:
        """Per-pipe roughness of the stack from one array (every copy) or a (k, n_pipes) array."""
        r = np.asarray(per_copy, float)
        return _tile(r, self.k) if r.ndim == 1 else r.reshape(-1)

    def tolerance_ratio(self, demand) -> float:
        """The smallest copy's share of the stack's total demand (``demand``: the stack's resolved
        demand per junction): the solver's relative tolerances (flow change and mass balance, both
        relative to the total demand) times this ratio hold every copy to at least the accuracy it
        has when solved alone."""
        totals = np.abs(np.asarray(demand)).reshape(self.k, self.nj).sum(axis=1)
        total = totals.sum()
        return float(totals.min() / total) if total > 0 else 1.0 / self.k

    def mass_errors(self, result: SolveResult, demand) -> np.ndarray:
        """Each copy's largest mass-balance error [m3/s] at ``result`` (fixed-grade junctions left
        out, as in the solver): ``demand`` is the stack's resolved demand per junction."""
        sn = self.network
        q = result.link_flow
        f = np.concatenate([sn.pipe_from, sn.pumps.from_node, sn.valves.from_node]).astype(np.int64)
        t = np.concatenate([sn.pipe_to, sn.pumps.to_node, sn.valves.to_node]).astype(np.int64)
        n = sn.n_nodes
        err = (np.bincount(t, weights=q, minlength=n)
               - np.bincount(f, weights=q, minlength=n))[:sn.n_junctions]
        err = np.abs(err - demand)
        if result._isolated_mask is not None:  # isolated and held junctions
            err[result._isolated_mask] = 0.0
        held = [sn.node_index[str(i)] for i in (result.snapshot.held_head or {})]
        err[held] = 0.0
        return err.reshape(self.k, self.nj).max(axis=1, initial=0.0)

    def per_copy(self, a: np.ndarray, kind: str) -> np.ndarray:
        """Largest |a| in each copy: ``kind`` "links" (pipes, pumps, valves, the solver's order)
        or "junctions"."""
        k = self.k
        a = np.abs(a)
        if kind == "junctions":
            return a.reshape(k, self.nj).max(axis=1, initial=0.0)
        npp, nu, nv = self.np_, self.nu, self.nv
        out = a[:k * npp].reshape(k, npp).max(axis=1, initial=0.0)
        if nu:
            out = np.maximum(out, a[k * npp:k * (npp + nu)].reshape(k, nu).max(axis=1))
        if nv:
            out = np.maximum(out, a[k * (npp + nu):].reshape(k, nv).max(axis=1))
        return out

    def settled(self, q, dq, dH, F1, F2, demand, solver) -> bool:
        """True when every copy meets the solver's convergence rule with its own reference flow
        and total demand, at the tolerances of one network alone (``tolerances``, set by
        ``StackedSolver``): the stack then stops at its slowest copy's own convergence, not at
        the stack-wide rule, whose relative tolerances are scaled to the smallest copy."""
        flow_tol, mass_tol = self.tolerances
        totals = np.abs(demand).reshape(self.k, self.nj).sum(axis=1)
        q_ref = np.maximum(np.maximum(totals, self.per_copy(q, "links")), solver.q_eps)
        return bool(np.all(self.per_copy(dq, "links") <= flow_tol * q_ref)
                    and ((not solver.head_step and not solver.nv)
                         or np.all(self.per_copy(dH, "junctions") <= solver.head_tol))
                    and np.all(self.per_copy(F1, "links") <= solver.energy_tol)
                    and np.all(self.per_copy(F2, "junctions")
                               <= np.maximum(mass_tol * totals, solver.mass_tol_abs)))

    def split(self, result: SolveResult, snaps, demand=None) -> list[SolveResult]:
        """Each copy's ``SolveResult`` out of the stack's: arrays sliced, ids mapped back, the mass
        error recomputed per copy (``demand``: the stack's resolved demand, else resolved here);
        iterations and factorizations are the stack's, the energy error
        the stack's largest (an upper bound for the copy)."""
        net, k = self.base, self.k
        nj, npp = self.nj, self.np_
        out = []
        valve = self.nv > 0
        if demand is None:
            demand = resolve(result.snapshot, self.network).demand
        masses = self.mass_errors(result, demand)
        zones = None
        if result.zone is not None:  # few distinct labels: map each once
            # a dict look-up per label (0.6 ms for 14 copies of the demo town; pandas' factorize
            # took 0.3 ms but its import 0.25 s, the only one a fit made: benchmarks/README.md C2)
            labels = result.zone.tolist()
            memo = self._zone_memo
            for z in set(labels) - memo.keys():
                memo[z] = self._rename_zone(z) if isinstance(z, str) else ""  # None: no zone
            zones = np.array([memo[z] for z in labels], dtype=object)
        for c in range(k):
            nodes, pipes, links = self.node_map[c], self.pipe_map[c], self.link_map[c]
            active = result._active[links]
            iso = result._isolated_mask[self.junction_map[c]] if result._isolated_mask is not None \
                else np.zeros(nj, dtype=bool)
            head, pressure = result.head[nodes], result.pressure[nodes]
            flow = result.flow[pipes]
            mass = float(masses[c])
            neg = np.flatnonzero((pressure[:nj] < 0) & ~iso)
            extra = {}
            if valve:
                vs = self.valve_map[c] - k * (npp + self.nu)
                zone = zones[self.junction_map[c]] if zones is not None else None
                extra = dict(valve_flow=result.valve_flow[vs], valve_headloss=result.valve_headloss[vs],
                             valve_state=result.valve_state[vs],
                             valve_notes=[self._rename(n) for n in result.valve_notes
                                          if str(c) in _copies(n)],
                             zone=zone,
                             _valve_state=None if result._valve_state is None
                             else result._valve_state[vs])
            elif zones is not None:
                extra = dict(zone=zones[self.junction_map[c]])
            held_flow = {}
            if result.held_flow:
                names = {self.name(c, n): n for n in (snaps[c].held_head or {})}
                held_flow = {str(names[key]): v for key, v in result.held_flow.items() if key in names}
            out.append(SolveResult(
                head=head, pressure=pressure, flow=flow,
                pump_flow=result.pump_flow[self.pump_map[c] - k * npp],
                velocity=result.velocity[pipes], headloss=result.headloss[pipes],
                iterations=result.iterations, factorizations=result.factorizations,
                max_mass_error=mass, max_energy_error=result.max_energy_error, converged=True,
                negative_pressure=self._junction_ids[neg].tolist(),
                isolated=self._junction_ids[iso].tolist(),
                closed_links=self._link_ids[~active].tolist(),
                snapshot=snaps[c], roughness=result.roughness[pipes], held_flow=held_flow,
                _grad=result._grad[links], _active=active,
                _isolated_mask=None if result._isolated_mask is None else iso.copy(), **extra))
        return out

    def join(self, results) -> SolveResult:
        """A stack's ``SolveResult`` assembled from one per copy (a warm start for the stack):
        every array the solver may start from is put in its stacked place."""
        k, npp, nu, nv = self.k, self.np_, self.nu, self.nv
        sn = self.network
        if len(results) != k:
            raise ValueError(f"{len(results)} results for a stack of {k} copies")

        def put(size, field, where, dtype=float):
            first = getattr(results[0], field)
            if first is None:
                return None
            out = np.empty(size, dtype=np.asarray(first).dtype if dtype is None else dtype)
            for c, r in enumerate(results):
                out[where(c)] = getattr(r, field)
            return out

        n_links = k * (npp + nu + nv)
        return SolveResult(
            head=put(sn.n_nodes, "head", lambda c: self.node_map[c]),
            pressure=put(sn.n_nodes, "pressure", lambda c: self.node_map[c]),
            flow=put(k * npp, "flow", lambda c: self.pipe_map[c]),
            pump_flow=put(k * nu, "pump_flow", lambda c: self.pump_map[c] - k * npp),
            velocity=put(k * npp, "velocity", lambda c: self.pipe_map[c]),
            headloss=put(k * npp, "headloss", lambda c: self.pipe_map[c]),
            iterations=max(r.iterations for r in results),
            factorizations=sum(r.factorizations for r in results),
            max_mass_error=max(r.max_mass_error for r in results),
            max_energy_error=max(r.max_energy_error for r in results), converged=True,
            negative_pressure=[], isolated=[], closed_links=[], snapshot=Snapshot(label="joined"),
            roughness=put(k * npp, "roughness", lambda c: self.pipe_map[c]),
            _grad=put(n_links, "_grad", lambda c: self.link_map[c]),
            _active=put(n_links, "_active", lambda c: self.link_map[c], dtype=bool),
            _isolated_mask=put(k * self.nj, "_isolated_mask", lambda c: self.junction_map[c],
                               dtype=bool),
            valve_flow=put(k * nv, "valve_flow", lambda c: self.valve_map[c] - k * (npp + nu)),
            valve_headloss=put(k * nv, "valve_headloss",
                               lambda c: self.valve_map[c] - k * (npp + nu)),
            valve_state=put(k * nv, "valve_state", lambda c: self.valve_map[c] - k * (npp + nu),
                            dtype=object),
            _valve_state=put(k * nv, "_valve_state", lambda c: self.valve_map[c] - k * (npp + nu),
                             dtype=None) if nv else None)

    def _rename(self, text: str) -> str:
        """Stacked ids in a message back to the original ids (longest first)."""
        if SEP not in text:
            return text
        for stacked in sorted((s for s in self._original if s in text), key=len, reverse=True):
            text = text.replace(stacked, self._original[stacked])
        return text

    def _rename_zone(self, label) -> str:
        label = str(label)
        if not label:
            return label
        return "+".join(self._original.get(part, part) for part in label.split("+"))


class StackedSolver:
    """A ``NetworkSolver`` over a ``StackedNetwork``, with the base solver's settings and the
    relative tolerances scaled per solve (``StackedNetwork.tolerance_ratio``).

    ``solve(snaps, roughness, warm)`` returns (stacked result, list of per-copy results);
    ``warm`` is the last stacked result, or a list of per-copy results (joined), or None (cold)."""

    def __init__(self, base_solver, k: int):
        from calib.hydraulics.solver import NetworkSolver
        self.stack = StackedNetwork(base_solver.network, k)
        b = base_solver  # not kept: the cache of stacks is keyed weakly by it
        self.flow_tol, self.mass_tol = b.flow_tol, b.mass_tol
        self.solver = NetworkSolver(
            self.stack.network, headloss=b.headloss, q_eps=b.q_eps,
            max_iterations=b.max_iterations, flow_tol=b.flow_tol, head_tol=b.head_tol,
            energy_tol=b.energy_tol, mass_tol=b.mass_tol, mass_tol_abs=b.mass_tol_abs,
            max_status_changes=b.max_status_changes, viscosity=b.viscosity,
            reuse_factor=b.reuse_factor, head_step=b.head_step)
        self.stack.tolerances = (b.flow_tol, b.mass_tol)  # each copy's own (``settled``)
        self.solver.copies = self.stack

    @property
    def k(self) -> int:
        return self.stack.k

    def solve(self, snaps, roughness=None, warm=None):
        st, s = self.stack, self.solver
        snap = st.snapshot(snaps)
        demand = resolve(snap, st.network).demand
        ratio = st.tolerance_ratio(demand)
        s.flow_tol, s.mass_tol = self.flow_tol * ratio, self.mass_tol * ratio
        if isinstance(warm, (list, tuple)):
            warm = st.join(warm)
        rough = None if roughness is None else st.roughness(roughness)
        res = s.solve(snap, roughness=rough, warm_start=warm)
        return res, st.split(res, snaps, demand)

    def sensitivities(self, result, dF1_dp, dF2_dp):
        """``NetworkSolver.sensitivities`` of the stack (rows in stacked order)."""
        return self.solver.sensitivities(result, dF1_dp, dF2_dp)

    def dheadloss_droughness(self, result):
        """``NetworkSolver.dheadloss_droughness`` of the stack (pipes in stacked order)."""
        return self.solver.dheadloss_droughness(result)


_CACHE: "weakref.WeakKeyDictionary" = weakref.WeakKeyDictionary()


def stacked_solver(base_solver, k: int) -> StackedSolver:
    """The ``StackedSolver`` of ``k`` copies for ``base_solver``, made once per (solver, k): the
    stack's sparsity pattern and ordering are built once and shared by every problem of a fit."""
    per = _CACHE.setdefault(base_solver, {})
    if k not in per:
        per[k] = StackedSolver(base_solver, k)
    return per[k]
