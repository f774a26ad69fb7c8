"""Generate the water network of Tallowmere, the project's fictional demo town (no real place).

    python field_samples/make_network.py

writes ``field_samples/tallowmere/network/{junctions,sources,pipes}.csv`` and
``field_samples/tallowmere/network.geojson`` (the same network). Deterministic: one seeded numpy
generator, so a rerun gives the same files.

The town: a street grid about 8000 x 5800 ft on a gentle valley side with a smooth hill to the east
(about 50 ft of relief). A treatment plant clearwell west of town, held at the grade of its
high-service pumps, feeds a 16 in transmission main; an elevated tank on the hill floats on the
system at a lower grade. Trunk mains of 12-16 in cross the grid; the street loops are 8 in; dead-end
6 in branches run out to the edge. The old town in the west was laid in unlined cast iron
(1930s-1960s, in rings outward); later areas in cement-lined ductile iron and PVC. C-factors are the
office model's guesses by material (CI 100, DI 130, PVC 150), not measured values; inside diameters
are taken equal to the nominal sizes. All names, places and values are invented for demonstration.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from calib import fileio  # noqa: E402
from calib.network.io import read_network, write_network_geojson  # noqa: E402

SEED = 291_1852
NX, NY = 19, 14  # street grid nodes west-east, south-north
BLOCK = 450.0  # [ft] between grid nodes
TOTAL_DEMAND = 1150.0  # [gpm] average-day base demand of the town
PLANT_HEAD, TANK_HEAD = 1004.0, 994.0  # [ft] hydraulic grades of the two sources
TANK_FLOOR, TANK_DEPTH = 960.0, 40.0  # [ft] the tank's floor grade and greatest water depth
OLD_TOWN = (900.0, 2900.0)  # [ft] centre of the first settlement, near the plant

# Pipe groups: material, install decade range, office C guess, roughness height [mm] for
# Darcy-Weisbach runs (rough guesses for aged pipe), all demo values.
GROUPS = {
    "CI-1930s": ("unlined cast iron", (1930, 1939), 100.0, 1.5),
    "CI-1950s": ("unlined cast iron", (1950, 1959), 100.0, 1.0),
    "CI-1960s": ("unlined cast iron", (1960, 1969), 100.0, 0.6),
    "DI": ("cement-lined ductile iron", (1970, 2005), 130.0, 0.1),
    "PVC": ("PVC", (1985, 2022), 150.0, 0.01),
}


def ground(x, y):
    """Ground elevation [ft]: a valley side rising west to east plus a smooth hill in the east."""
    slope = 806.0 + 0.0022 * x
    hill = 34.0 * np.exp(-((x - 6400.0) ** 2 + (y - 3600.0) ** 2) / (2 * 1500.0 ** 2))
    return slope + hill


def grid_nodes(rng):
    """Junction positions of the street grid [ft], jittered so streets are not ruler-straight."""
    gx, gy = np.meshgrid(np.arange(NX) * BLOCK, np.arange(NY) * BLOCK, indexing="ij")
    x = gx.ravel() + rng.uniform(-60, 60, gx.size)
    y = gy.ravel() + rng.uniform(-60, 60, gy.size)
    return x, y


def node_number(i, j):
    return i * NY + j


def grid_edges():
    """Street-grid edges as (a, b, is_trunk, trunk diameter [in])."""
    trunk_row, trunk_col = NY // 2, NX // 3
    edges = []
    for i in range(NX):
        for j in range(NY):
            if i + 1 < NX:  # west-east street
                trunk = j == trunk_row
                edges.append((node_number(i, j), node_number(i + 1, j), trunk,
                              16.0 if i < NX // 2 else 12.0))
            if j + 1 < NY:  # south-north street
                trunk = i == trunk_col
                edges.append((node_number(i, j), node_number(i, j + 1), trunk, 12.0))
    return edges


def connected(n_nodes, edges) -> bool:
    a = np.array([e[0] for e in edges])
    b = np.array([e[1] for e in edges])
    graph = sp.coo_matrix((np.ones(len(a)), (a, b)), shape=(n_nodes, n_nodes))
    return connected_components(graph, directed=False)[0] == 1


def thin_grid(rng, edges, n_nodes, share=0.11):
    """Drop a share of the non-trunk street pipes (streets without a main) keeping one network."""
    edges = list(edges)
    for k in rng.permutation(len(edges))[: int(share * len(edges))]:
        candidate = edges[k]
        if candidate is None or candidate[2]:
            continue
        trial = [e for e in edges if e is not None and e is not candidate]
        if connected(n_nodes, trial):
            edges[k] = None
    return [e for e in edges if e is not None]


def branches(rng, x, y):
    """Dead-end 6 in branches running outward from edge nodes of the grid: new nodes and pipes."""
    edge_nodes = [node_number(i, j) for i in range(NX) for j in range(NY)
                  if i in (0, NX - 1) or j in (0, NY - 1)]
    starts = rng.choice(edge_nodes, size=40, replace=False)
    cx, cy = x.mean(), y.mean()
    new_x, new_y, pipes = [], [], []
    n = len(x)
    for s in starts:
        direction = np.array([x[s] - cx, y[s] - cy])
        direction /= np.linalg.norm(direction)
        prev, px, py = int(s), x[s], y[s]
        for _ in range(rng.integers(1, 4)):
            step = rng.uniform(280, 480)
            turn = rng.normal(0, 0.35)
            c, si = np.cos(turn), np.sin(turn)
            d = np.array([c * direction[0] - si * direction[1], si * direction[0] + c * direction[1]])
            px, py = px + step * d[0], py + step * d[1]
            new_x.append(px)
            new_y.append(py)
            pipes.append((prev, n, False, 6.0))
            prev, n = n, n + 1
    return np.array(new_x), np.array(new_y), pipes


def pipe_group(rng, xm, ym, trunk, branch):
    """Calibration group of a pipe from where it lies (rings of age around the old town)."""
    if trunk:
        return "DI"
    r = np.hypot(xm - OLD_TOWN[0], ym - OLD_TOWN[1])
    if branch:
        return "PVC" if rng.random() < 0.7 else "DI"
    if r < 2200:
        group = "CI-1930s"
    elif r < 3600:
        group = "CI-1950s"
    elif r < 4700:
        group = "CI-1960s"
    else:
        group = "DI" if rng.random() < 0.55 else "PVC"
    if group.startswith("CI") and rng.random() < 0.08:  # mains replaced since
        group = "PVC"
    return group


def demands(rng, n_junctions, hydrant_only):
    """Base demands [gpm]: lognormal by junction, a share with none, scaled to the town total."""
    d = rng.lognormal(0.0, 0.6, n_junctions)
    d[rng.random(n_junctions) < 0.15] = 0.0
    d[hydrant_only] = 0.0
    return np.round(d * TOTAL_DEMAND / d.sum(), 2)


def build(rng):
    """The town as three DataFrames with unit headers (US units)."""
    x, y = grid_nodes(rng)
    n_grid = len(x)
    edges = thin_grid(rng, grid_edges(), n_grid)
    bx, by, branch_pipes = branches(rng, x, y)
    x, y = np.concatenate([x, bx]), np.concatenate([y, by])
    # The plant's transmission main enters at the west end of the trunk row through a meter vault.
    west = node_number(0, NY // 2)
    x, y = np.append(x, x[west] - 1400.0), np.append(y, y[west] + 150.0)
    vault = len(x) - 1
    n_j = len(x)
    plant, tank = n_j, n_j + 1
    tank_node = int(np.argmin(np.hypot(x[:n_grid] - 6400.0, y[:n_grid] - 3600.0)))
    links = ([(a, b, t, dia if t else 8.0, False) for a, b, t, dia in edges]
             + [(a, b, False, 6.0, True) for a, b, _, _ in branch_pipes]
             + [(plant, vault, True, 16.0, False), (vault, west, True, 16.0, False),
                (tank, tank_node, True, 12.0, False)])
    sx = np.array([x[vault] - 900.0, x[tank_node] + 120.0])
    sy = np.array([y[vault] - 80.0, y[tank_node] + 90.0])
    all_x, all_y = np.concatenate([x, sx]), np.concatenate([y, sy])
    junctions = junction_frame(rng, x, y, n_grid, branch_pipes, vault)
    sources = pd.DataFrame({
        "id": ["PLANT", "HILLTANK"], "head [ft]": [PLANT_HEAD, TANK_HEAD],
        "kind": ["reservoir", "tank"],
        "elevation [ft]": [np.round(ground(sx[0], sy[0]) - 12.0, 1),
                           np.round(ground(sx[1], sy[1]), 1)],
        "x [ft]": np.round(sx, 1), "y [ft]": np.round(sy, 1), "zone": ["plant", "hill"],
        # The tank's floor and greatest depth, so that an operator's level becomes a grade.
        "floor [ft]": [None, TANK_FLOOR], "level_max [ft]": [None, TANK_DEPTH]})
    pipes = pipe_frame(rng, links, all_x, all_y, list(junctions["id"]) + ["PLANT", "HILLTANK"])
    return junctions, sources, pipes


def zone_of(x, y):
    if np.hypot(x - 6400.0, y - 3600.0) < 1700.0:
        return "hill"
    if np.hypot(x - OLD_TOWN[0], y - OLD_TOWN[1]) < 2200.0:
        return "old town"
    return "north" if y > 2900.0 else "south"


def junction_frame(rng, x, y, n_grid, branch_pipes, vault):
    n = len(x)
    dead_ends = {b for _, b, _, _ in branch_pipes} - {a for a, _, _, _ in branch_pipes}
    hydrant = np.zeros(n, dtype=bool)
    hydrant[list(dead_ends)] = True
    others = np.flatnonzero(~hydrant)
    others = others[others != vault]
    hydrant[rng.choice(others, size=n // 3 - hydrant.sum(), replace=False)] = True
    no_demand = np.zeros(n, dtype=bool)
    no_demand[vault] = True
    return pd.DataFrame({
        "id": [f"J{k + 1:03d}" for k in range(n)],
        "elevation [ft]": np.round(ground(x, y) + rng.normal(0, 1.0, n), 1),
        "demand [gpm]": demands(rng, n, no_demand),
        "x [ft]": np.round(x, 1), "y [ft]": np.round(y, 1),
        "zone": [zone_of(a, b) for a, b in zip(x, y)],
        "hydrant": np.where(hydrant, "yes", "no")})


def pipe_frame(rng, links, x, y, ids):
    rows = []
    for k, (a, b, trunk, dia, branch) in enumerate(links):
        group = pipe_group(rng, (x[a] + x[b]) / 2, (y[a] + y[b]) / 2, trunk, branch)
        material, (y0, y1), c, rough = GROUPS[group]
        installed = 1975 if trunk else int(rng.integers(y0, y1 + 1))
        length = np.hypot(x[a] - x[b], y[a] - y[b]) * rng.uniform(1.0, 1.04)  # street curves
        rows.append({"id": f"P{k + 1:03d}", "from": ids[a], "to": ids[b],
                     "length [ft]": round(float(length)), "diameter [in]": dia, "roughness": c,
                     "group": group, "material": material, "installed": installed,
                     "status": "open", "minor_loss": 0.0, "roughness_height [mm]": rough})
    frame = pd.DataFrame(rows)
    set_valves(frame)
    return frame


def set_valves(pipes):
    """Two normally closed valves on south-north streets of the east side, one check valve on a
    dead-end branch, minor losses for the plant's valves and meter."""
    closed = [k for k in (street_pipe(pipes, i, 6) for i in range(12, NX)) if k is not None][:2]
    pipes.loc[closed, "status"] = "closed"
    branch = pipes.index[pipes["diameter [in]"] == 6.0][3]
    pipes.loc[branch, "status"] = "check"
    pipes.loc[pipes.index[pipes["diameter [in]"] == 16.0][-2:], "minor_loss"] = 2.5


def street_pipe(pipes, i, j):
    """Index of the south-north street pipe from grid node (i, j), None where the grid has none."""
    a, b = f"J{node_number(i, j) + 1:03d}", f"J{node_number(i, j + 1) + 1:03d}"
    match = pipes.index[(pipes["from"] == a) & (pipes["to"] == b)]
    return match[0] if len(match) else None


def main(out=HERE / "tallowmere"):
    rng = np.random.default_rng(SEED)
    junctions, sources, pipes = build(rng)
    folder = Path(out) / "network"
    fileio.write_csv(folder / "junctions.csv", junctions, float_format=None)
    fileio.write_csv(folder / "sources.csv", sources, float_format=None)
    fileio.write_csv(folder / "pipes.csv", pipes, float_format=None)
    network = read_network(folder)  # checks the generated town like any user's network
    write_network_geojson(network, Path(out) / "network.geojson", units="us", length_unit="ft")
    print(f"Tallowmere: {network.n_junctions} junctions, {network.n_sources} sources, "
          f"{network.n_pipes} pipes, {int(network.hydrant.sum())} hydrants, base demand "
          f"{junctions['demand [gpm]'].sum():.0f} gpm -> {folder}")


if __name__ == "__main__":
    main()
