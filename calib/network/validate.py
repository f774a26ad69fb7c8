"""Checks between a network's tables, and the assembly of the ``Network`` once they pass.

Every problem is collected (file, row, id, field, what is wrong, what is plausible) and raised at once
as one ``NetworkError``: duplicate ids (also across junctions and sources, and across pipes and pumps),
link ends that name no node, links from a node to itself, non-positive length or diameter, C outside
1-200, negative minor loss, a roughness height outside 0-10 mm, bad pump curves, a source with no pipe, and parts of
the network that no fixed-grade source feeds (``scipy.sparse.csgraph.connected_components`` over open
pipes and running pumps).

This module does not read files (``calib.network.tables``, ``calib.network.geojson``).
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from calib import limits
from calib.errors import NetworkError, Problem
from calib.units import FT as FT_M
from calib.network import pump_curve
from calib.network.model import Network, PipeStatus, Pumps
from calib.network.tables import NetworkTables, ParsedTable
from calib.network.ranges import check_ranges

#: Plausible Hazen-Williams C: new smooth pipe is about 150, badly tuberculated mains go below 40.
C_RANGE = (limits.C_FACTOR.low, limits.C_FACTOR.high)  # stated in calib.limits
#: Plausible Darcy-Weisbach absolute roughness [m]: drawn tubing about 0.0015 mm, new cast iron
#: 0.26 mm, riveted steel up to 9 mm (Moody 1944, "Friction factors for pipe flow", Trans. ASME 66,
#: roughness chart; from memory). Above 10 mm a value in the wrong unit is the likely cause.
ROUGHNESS_HEIGHT_MAX = limits.ROUGHNESS_HEIGHT.high  # stated in calib.limits
#: How many junction ids to name for a part of the network with no source.
NAMED_IDS = 5


def _problem(table: ParsedTable, i: int, message: str, field: str | None = None,
             expected: str | None = None) -> Problem:
    ids = table.get("id", "")
    return Problem(message, file=table.file, row=int(table.rows[i]), id=str(ids[i]) or None,
                   field=field, expected=expected)


def _check_ids(tables: list[ParsedTable], what: str, problems: list[Problem]) -> None:
    """Ids must be unique across ``tables`` (e.g. junctions and sources share one id space)."""
    first: dict[str, tuple[ParsedTable, int]] = {}
    for table in tables:
        for i, key in enumerate(table.get("id", "")):
            if key == "":
                continue
            if key in first:
                other, j = first[key]
                problems.append(_problem(table, i, f"duplicate {what} id '{key}', already used in "
                                         f"{other.file} row {int(other.rows[j])}", field="id",
                                         expected=f"ids unique across {what}s"))
            else:
                first[key] = (table, i)


def _link_ends(table: ParsedTable, index: dict[str, int], problems: list[Problem]):
    """Node numbers of each link's ends (-1 where unknown), with a problem per bad end."""
    ends = {}
    node_files = "junctions.csv or sources.csv" if table.file.endswith(".csv") else "the nodes"
    for end in ("from", "to"):
        names = table.get(end, "")
        numbers = np.array([index.get(n, -1) for n in names], dtype=np.int64)
        for i in np.flatnonzero((numbers < 0) & (names != "")):
            problems.append(_problem(table, i, f"node '{names[i]}' is not in {node_files}",
                                     field=end, expected="the id of a junction or a source"))
        ends[end] = numbers
    same = (ends["from"] >= 0) & (ends["from"] == ends["to"])
    for i in np.flatnonzero(same):
        problems.append(_problem(table, i, f"the link runs from node '{table.get('from')[i]}' to "
                                 "itself", field="to", expected="two different nodes"))
    return ends["from"], ends["to"]


def _check_pipe_values(pipes: ParsedTable, problems: list[Problem]) -> None:
    for name, what in (("length", "length"), ("diameter", "diameter")):
        values = pipes.get(name)
        for i in np.flatnonzero(np.isfinite(values) & (values <= 0)):
            problems.append(_problem(pipes, i, f"the {what} must be positive", field=name,
                                     expected=f"a {what} above zero"))
    c = pipes.get("roughness")
    lo, hi = C_RANGE
    for i in np.flatnonzero(np.isfinite(c) & ((c < lo) | (c > hi))):
        problems.append(_problem(pipes, i, f"Hazen-Williams C {c[i]:g} is out of range",
                                 field="roughness", expected=f"C between {lo:g} and {hi:g}; "
                                 "new PVC about 150, old unlined cast iron 40-100"))
    for name in ("minor_loss", "roughness_height"):
        values = pipes.get(name)
        for i in np.flatnonzero(np.isfinite(values) & (values < 0)):
            problems.append(_problem(pipes, i, f"{name.replace('_', ' ')} must not be negative",
                                     field=name, expected="zero or more"))
    e = pipes.get("roughness_height")
    for i in np.flatnonzero(np.isfinite(e) & (e > ROUGHNESS_HEIGHT_MAX)):
        problems.append(_problem(pipes, i, f"roughness height {e[i] * 1e3:g} mm is out of range",
                                 field="roughness_height", expected=f"0 to "
                                 f"{ROUGHNESS_HEIGHT_MAX * 1e3:g} mm; new cast iron about 0.26 mm, "
                                 "riveted steel up to 9 mm"))


def _pump_curves(pumps: ParsedTable, problems: list[Problem]) -> np.ndarray:
    """(n_pumps, 3) array of h0, r, n; NaN rows where the curve is missing or bad."""
    curves = np.full((len(pumps), 3), np.nan)
    three = [pumps.get(f"{q}_{k}") for k in (1, 2, 3) for q in ("flow", "head")]
    design = [pumps.get(name) for name in ("design_head", "design_flow", "shutoff_head")]
    for i in range(len(pumps)):
        points = np.array([c[i] for c in three])
        try:
            if np.all(np.isfinite(points)):
                curves[i] = pump_curve.three_point_curve(points[0::2], points[1::2])
            elif np.isfinite(design[0][i]) and np.isfinite(design[1][i]):
                curves[i] = pump_curve.design_point_curve(design[0][i], design[1][i],
                                                          design[2][i])
            else:
                problems.append(_problem(pumps, i, "the pump has no head curve", field="head_1",
                                         expected="head_1..3 and flow_1..3, or design_head and "
                                         "design_flow (shutoff_head optional)"))
        except ValueError as exc:
            problems.append(_problem(pumps, i, f"bad head curve: {exc}", field="head_1",
                                     expected="heads falling as flows grow"))
    speed = pumps.get("speed")
    for i in np.flatnonzero(np.isfinite(speed) & (speed < 0)):
        problems.append(_problem(pumps, i, "the speed must not be negative", field="speed",
                                 expected="a relative speed such as 1 (0 = off)"))
    return curves


def _check_tank_levels(s: ParsedTable, problems: list[Problem]) -> None:
    """A tank's ``level_max`` is above zero and needs a ``floor``; its head lies in the tank."""
    floor, level_max, head = s.get("floor"), s.get("level_max"), s.get("head")
    for i in np.flatnonzero(np.isfinite(level_max) & (level_max <= 0)):
        problems.append(_problem(s, i, "level_max must be above zero", field="level_max",
                                 expected="the greatest water depth of the tank, e.g. 40 ft"))
    for i in np.flatnonzero(np.isfinite(level_max) & ~np.isfinite(floor)):
        problems.append(_problem(s, i, "level_max is given without a floor", field="floor",
                                 expected="the elevation of the tank's floor (the grade at level 0)"))
    full = floor + np.where(np.isfinite(level_max) & (level_max > 0), level_max, np.inf)
    for i in np.flatnonzero(np.isfinite(floor) & np.isfinite(head) & ((head < floor) | (head > full))):
        top = f" to {full[i] / FT_M:.1f} ft" if np.isfinite(full[i]) else " or more"
        problems.append(_problem(s, i, "the head lies outside the tank", field="head",
                                 expected=f"a grade from the floor {floor[i] / FT_M:.1f} ft{top}"))


def _check_connectivity(tables: NetworkTables, n_junctions: int, n_nodes: int, links,
                        repeated: np.ndarray, problems: list[Problem]) -> None:
    """Each connected part (over open pipes and running pumps) needs a source; each source a link.

    Rows that repeat an id (``repeated``, reported already) are left out of both checks.
    """
    frm, to, active = links
    ok = (frm >= 0) & (to >= 0)
    for s in range(n_junctions, n_nodes):
        if not repeated[s] and not np.any(ok & ((frm == s) | (to == s))):
            problems.append(_problem(tables.sources, s - n_junctions, "the source has no pipe",
                                     expected="at least one pipe or pump joining it to the "
                                     "network"))
    use = ok & active
    graph = sp.coo_matrix((np.ones(use.sum()), (frm[use], to[use])), shape=(n_nodes, n_nodes))
    _, label = connected_components(graph, directed=False)
    fed = np.zeros(label.max() + 1 if n_nodes else 0, dtype=bool)
    fed[label[n_junctions:][~repeated[n_junctions:]]] = True
    junctions = tables.junctions
    ids = junctions.get("id", "")
    for part in np.flatnonzero(~fed):
        members = np.flatnonzero((label[:n_junctions] == part) & ~repeated[:n_junctions])
        if len(members) == 0:
            continue
        named = ", ".join(f"'{ids[m]}'" for m in members[:NAMED_IDS])
        more = f" and {len(members) - NAMED_IDS} more" if len(members) > NAMED_IDS else ""
        problems.append(_problem(
            junctions, members[0],
            f"{len(members)} junction(s) ({named}{more}) reach no source through open pipes "
            "or running pumps", expected="a path of open pipes to a reservoir or tank; check "
            "closed valves and missing pipes"))


def assemble(tables: NetworkTables, problems: list[Problem], name: str = "network",
             pipe_geometry: list | None = None) -> Network:
    """Check ``tables`` against each other and build the ``Network``.

    ``problems`` holds what parsing found already; this adds the checks between tables and raises
    one ``NetworkError`` listing them all when there is any.
    """
    problems = list(problems)
    j, s, p = tables.junctions, tables.sources, tables.pipes
    pumps = tables.pumps
    _check_ids([j, s], "node", problems)
    _check_ids([p] + ([pumps] if pumps is not None else []), "pipe or pump", problems)
    if len(j) == 0:
        problems.append(Problem("the network has no junctions", file=j.file))
    if len(s) == 0:
        problems.append(Problem("the network has no source (reservoir or tank)", file=s.file,
                                expected="at least one row with a fixed hydraulic grade"))
    node_ids = np.concatenate([j.get("id", ""), s.get("id", "")]).astype(object)
    index: dict[str, int] = {}
    for i, k in enumerate(node_ids):  # the first row of a duplicated id is the node
        if k != "":
            index.setdefault(str(k), i)
    repeated = np.array([index.get(str(k), -1) != i for i, k in enumerate(node_ids)], dtype=bool)
    p_from, p_to = _link_ends(p, index, problems)
    _check_pipe_values(p, problems)
    check_ranges(tables, problems)  # plausibility of every number (calib.limits)
    status = p.get("status", 0) if "status" in p.values else np.zeros(len(p), np.int8)
    status = np.asarray(status, dtype=np.int8)
    frm, to, active = p_from, p_to, status != PipeStatus.CLOSED
    pump_parts = None
    if pumps is not None and len(pumps):
        u_from, u_to = _link_ends(pumps, index, problems)
        curves = _pump_curves(pumps, problems)
        speed = pumps.get("speed")
        speed = np.where(np.isfinite(speed), speed, 1.0)
        pump_parts = (u_from, u_to, curves, speed)
        frm, to = np.concatenate([frm, u_from]), np.concatenate([to, u_to])
        active = np.concatenate([active, speed > 0])
    _check_tank_levels(s, problems)
    if len(j) and len(s):
        _check_connectivity(tables, len(j), len(node_ids), (frm, to, active), repeated,
                            problems)
    if problems:
        raise NetworkError(problems)
    return _build(tables, node_ids, p_from, p_to, status, pump_parts, name, pipe_geometry)


def _or(values: np.ndarray, default: float) -> np.ndarray:
    return np.where(np.isfinite(values), values, default)


def _build(tables, node_ids, p_from, p_to, status, pump_parts, name, pipe_geometry) -> Network:
    j, s, p = tables.junctions, tables.sources, tables.pipes
    head = s.get("head")
    pumps = Pumps()
    if pump_parts is not None:
        u_from, u_to, curves, speed = pump_parts
        pumps = Pumps(ids=tables.pumps.get("id", "").astype(object), from_node=u_from,
                      to_node=u_to, shutoff_head=curves[:, 0], curve_r=curves[:, 1],
                      curve_n=curves[:, 2], speed=speed)
    return Network(
        node_ids=node_ids, n_junctions=len(j),
        elevation=np.concatenate([j.get("elevation"), np.where(np.isfinite(s.get("elevation")),
                                                               s.get("elevation"), head)]),
        demand=j.get("demand"), source_head=head,
        pipe_ids=p.get("id", "").astype(object), pipe_from=p_from, pipe_to=p_to,
        length=p.get("length"), diameter=p.get("diameter"), roughness=p.get("roughness"),
        minor_loss=_or(p.get("minor_loss"), 0.0), status=status,
        roughness_height=p.get("roughness_height"),
        group=p.get("group", "").astype(object), material=p.get("material", "").astype(object),
        installed=p.get("installed"),
        source_kind=s.get("kind", "reservoir").astype(object),
        source_floor=s.get("floor"), source_level_max=s.get("level_max"),
        hydrant=np.asarray(j.get("hydrant", False), dtype=bool),
        x=np.concatenate([j.get("x"), s.get("x")]), y=np.concatenate([j.get("y"), s.get("y")]),
        zone=np.concatenate([j.get("zone", ""), s.get("zone", "")]).astype(object),
        pumps=pumps, pipe_geometry=pipe_geometry, name=name)
