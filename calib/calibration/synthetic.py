"""Synthetic networks and flow-test readings with a known truth: for checks, the benchmark and demos.

Nothing here is real: a grid of junctions fed by one reservoir, pipe groups by district, and readings
solved with chosen "true" C-factors plus Gaussian gauge noise. The fit must give the truth back within
its intervals; that is the synthetic-truth check of the calibration.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from calib import fileio, units
from calib.calibration.tests_io import TestSet
from calib.flowtest.pitot import PITOT_CONSTANT_SI
from calib.network.model import Network

MATERIALS = ("cast iron", "ductile iron", "pvc", "asbestos cement", "steel")


def grid_network(nx: int, ny: int, spacing: float = 150.0, n_groups: int = 3, seed: int = 0,
                 source_head: float = 75.0, demand: float = 0.3e-3) -> Network:
    """A looped ``nx`` x ``ny`` grid [m spacing] fed at a corner by one reservoir (grade ``source_head`` m).

    Groups ``G1..Gn`` are vertical bands of the grid (districts); each band has one material and
    install decade. Diameters 6 and 8 in, with a 10 in spine along the first row and column.
    """
    rng = np.random.default_rng(seed)
    nj = nx * ny
    ix, iy = np.meshgrid(np.arange(nx), np.arange(ny))
    ix, iy = ix.ravel(), iy.ravel()
    node = iy * nx + ix
    frm, to = [], []
    h = ix < nx - 1
    frm.append(node[h]); to.append(node[h] + 1)
    v = iy < ny - 1
    frm.append(node[v]); to.append(node[v] + nx)
    frm = np.concatenate(frm + [[nj]])
    to = np.concatenate(to + [[0]])
    n_pipes = len(frm)
    diam_in = rng.choice([6.0, 6.0, 8.0], size=n_pipes)
    x_mid = (ix[np.minimum(frm, nj - 1)] + ix[np.minimum(to, nj - 1)]) / 2.0
    spine = (iy[np.minimum(frm, nj - 1)] == 0) | (ix[np.minimum(frm, nj - 1)] == 0)
    diam_in[spine[:n_pipes]] = 10.0
    diam_in[-1] = 16.0
    band = np.minimum((x_mid / max(nx - 1, 1) * n_groups).astype(int), n_groups - 1)
    band[-1] = 0
    group = np.array([f"G{b + 1}" for b in band], dtype=object)
    material = np.array([MATERIALS[b % len(MATERIALS)] for b in band], dtype=object)
    installed = np.array([1950.0 + 15 * (b % 5) for b in band])
    length = spacing * rng.uniform(0.8, 1.2, size=n_pipes)
    length[-1] = 200.0
    elevation = np.concatenate([rng.uniform(0.0, 15.0, size=nj), [source_head]])
    ids = np.array([f"J{i}" for i in range(nj)] + ["R1"], dtype=object)
    return Network(
        node_ids=ids, n_junctions=nj, elevation=elevation, demand=np.full(nj, demand),
        source_head=np.array([source_head]), pipe_ids=np.array([f"P{k}" for k in range(n_pipes)],
                                                               dtype=object),
        pipe_from=frm, pipe_to=to, length=length, diameter=diam_in * units.INCH,
        roughness=np.full(n_pipes, 120.0), group=group, material=material, installed=installed,
        hydrant=np.ones(nj, dtype=bool), x=np.concatenate([ix * spacing, [-200.0]]),
        y=np.concatenate([iy * spacing, [0.0]]), name="synthetic grid")


def zoned_grid(setting_psi: float, drop: float = 20.0, seed: int = 1):
    """``grid_network(6, 4, n_groups=2)`` cut into two pressure zones: its three eastern columns
    ``drop`` m lower, joined to the rest only by one reducing valve (8 in, K 3 fully open) set at
    ``setting_psi`` [psi] at its outlet; the other pipes across the cut are left out.

    Returns ``(network, east)``, ``east`` the mask of the low zone's junctions.
    """
    from calib.network.model import Valves
    net = grid_network(6, 4, n_groups=2, seed=seed)
    nj = net.n_junctions
    east = np.arange(nj) % 6 >= 3
    elev = net.elevation.copy()
    elev[:nj][east] -= drop
    side = np.r_[east, [False]]  # the reservoir is on the west side
    f, t = net.pipe_from, net.pipe_to
    cross = np.flatnonzero(side[f] != side[t])
    keep = np.setdiff1d(np.arange(net.n_pipes), cross)
    k = cross[0]
    a, b = (f[k], t[k]) if not side[f[k]] else (t[k], f[k])
    arrays = {name: getattr(net, name)[keep] for name in
              ("pipe_ids", "pipe_from", "pipe_to", "length", "diameter", "roughness",
               "minor_loss", "status", "roughness_height", "group", "material", "installed")}
    valves = Valves(ids=["V1"], from_node=[a], to_node=[b], diameter=[8 * units.INCH], kind=[0],
                    setting=[setting_psi * units.PSI], mode=[0], minor_loss=[3.0])
    return net.replace(elevation=elev, valves=valves, name="zoned synthetic grid", **arrays), east


def plan_tests(network: Network, n_tests: int, seed: int = 0, flow_gpm=(800.0, 1500.0),
               n_gauges: int = 2, spread_over=None):
    """Pick ``n_tests`` tests: a flowing hydrant and ``n_gauges`` gauges among its neighbours.

    Returns a list of ``(flows {node: m3/s}, gauges [node, ...])``. ``spread_over`` limits the flowing
    hydrants to those junction numbers (default: every junction but the one next to the source).
    """
    rng = np.random.default_rng(seed)
    nj = network.n_junctions
    cand = np.arange(1, nj) if spread_over is None else np.asarray(spread_over)
    # spread the flowing hydrants across the map (by x) so that every district is loaded
    order = cand[np.argsort(network.x[cand] + rng.uniform(0, 1e-3, size=len(cand)), kind="stable")]
    slots = np.array_split(order, n_tests)
    picks = np.array([rng.choice(s) for s in slots if len(s)])
    adj = [[] for _ in range(nj)]
    for a, b in zip(network.pipe_from, network.pipe_to):
        if a < nj and b < nj:
            adj[a].append(b)
            adj[b].append(a)
    plan = []
    for node in picks:
        q = rng.uniform(*flow_gpm) * units.GPM
        ring = [int(n) for n in adj[node]]
        gauges = [int(node)] + list(rng.choice(ring, size=min(n_gauges - 1, len(ring)), replace=False))
        plan.append(({int(node): q}, gauges))
    return plan


def synthetic_tests(network: Network, roughness: np.ndarray, plan, sigma: float = units.PSI,
                    seed: int = 0, round_to: float | None = None, solver=None,
                    static: bool = True) -> TestSet:
    """Solve ``plan`` with ``roughness`` and return the readings with N(0, sigma) noise [Pa].

    ``round_to`` [Pa] rounds readings as a gauge is read (e.g. 0.5 psi). Gauge height 0.
    """
    from calib.hydraulics import NetworkSolver, Snapshot
    rng = np.random.default_rng(seed)
    solver = solver or NetworkSolver(network, headloss="hazen-williams")
    ids = network.node_ids
    cols = {k: [] for k in ("test", "node", "kind", "pressure")}
    # the static loading is the same for every test here (normal demand, one fixed source): solve it once
    at_rest = solver.solve(Snapshot(), roughness=roughness) if static else None
    for t, (flows, gauges) in enumerate(plan):
        loaded = solver.solve(Snapshot(extra_demand={str(ids[n]): q for n, q in flows.items()}),
                              roughness=roughness)
        for kind, res in ((("static", at_rest),) if static else ()) + (("residual", loaded),):
            for g in gauges:
                cols["test"].append(t)
                cols["node"].append(g)
                cols["kind"].append(kind)
                cols["pressure"].append(float(res.pressure[g]))
    p = np.asarray(cols["pressure"]) + rng.normal(0.0, sigma, size=len(cols["pressure"]))
    if round_to:
        p = np.round(p / round_to) * round_to
    node = np.asarray(cols["node"], dtype=np.int64)
    n_tests = len(plan)
    return TestSet(folder="<synthetic>", test_ids=[f"T{t + 1}" for t in range(n_tests)],
                   flows=[dict(f) for f, _ in plan], source_head=[{} for _ in range(n_tests)],
                   day=np.zeros(n_tests, dtype=np.int64), days=[""], info=pd.DataFrame(),
                   test=np.asarray(cols["test"], dtype=np.int64), node=node,
                   kind=np.asarray(cols["kind"], dtype=object), pressure=p,
                   gauge_height=np.zeros(len(p)), sigma=np.full(len(p), sigma),
                   row=np.arange(len(p), dtype=np.int64) + 2,
                   elevation=network.elevation[node].astype(float))


def write_tests_folder(tests: TestSet, network: Network, folder, system: str = "us",
                       pitot_tests=()) -> None:
    """Write ``tests`` as a tests folder (flows.csv, pressures.csv) with ``us`` or ``si`` unit headers.

    Tests named in ``pitot_tests`` get their flows in pitot form (one 2.5 in outlet, c 0.90, the pitot
    pressure computed back from the flow with NFPA 291's Q = 29.83 c d^2 sqrt(p)).
    """
    folder = Path(folder)
    fu, pu = units.display_unit("flow", system), units.display_unit("pressure", system)
    lu, du = units.display_unit("length", system), units.display_unit("diameter", system)
    rows = []
    for t, tid in enumerate(tests.test_ids):
        for n, q in tests.flows[t].items():
            row = {"test_id": tid, "node": str(network.node_ids[n]), f"flow [{fu}]": "",
                   f"pitot [{pu}]": "", f"outlet_diameter [{du}]": "", "coefficient": ""}
            if tid in pitot_tests:
                p_pa = (q / (PITOT_CONSTANT_SI * 0.9 * (2.5 * units.INCH) ** 2)) ** 2  # Q = K c d^2 sqrt(p)
                row[f"pitot [{pu}]"] = repr(float(units.from_si(p_pa, "pressure", pu)))
                row[f"outlet_diameter [{du}]"] = repr(float(units.from_si(2.5 * units.INCH,
                                                                          "diameter", du)))
                row["coefficient"] = "0.9"
            else:
                row[f"flow [{fu}]"] = repr(float(units.from_si(q, "flow", fu)))
            rows.append(row)
    fileio.write_csv(folder / "flows.csv", pd.DataFrame(rows), float_format=None)
    prow = {}
    for i in range(tests.n_readings):
        key = (tests.test_ids[tests.test[i]], str(network.node_ids[tests.node[i]]))
        r = prow.setdefault(key, {"test_id": key[0], "node": key[1], f"static [{pu}]": "",
                                  f"residual [{pu}]": "", f"gauge_height [{lu}]": "",
                                  f"sigma [{pu}]": ""})
        r[f"{tests.kind[i]} [{pu}]"] = repr(float(units.from_si(tests.pressure[i], "pressure", pu)))
        r[f"gauge_height [{lu}]"] = repr(float(units.from_si(tests.gauge_height[i], "length", lu)))
        r[f"sigma [{pu}]"] = repr(float(units.from_si(tests.sigma[i], "pressure", pu)))
    fileio.write_csv(folder / "pressures.csv", pd.DataFrame(list(prow.values())), float_format=None)
