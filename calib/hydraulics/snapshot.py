"""A snapshot: the loading of one steady state of a network (demands, flowing hydrants, tank levels).

A snapshot is plain data in SI units. ``resolve`` checks it against a network at the front door,
before any iteration, and turns names into index arrays the solver uses directly.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from calib.errors import InputError, Problem


@dataclass(frozen=True)
class Snapshot:
    """Loading of one steady state.

    - ``demand_factor`` [-]: multiplies every base demand (e.g. 1.3 for the hour of the test).
    - ``extra_demand`` {junction id: m3/s}: added demands, e.g. the flowing hydrants of a test.
    - ``source_head`` {source id: m}: fixed grades that replace the network's, e.g. the tank level
      read at the time of the test.
    - ``held_head`` {junction id: m}: junctions held at a fixed hydraulic grade (e.g. a hydrant at
      its elevation plus 20 psi); their draw is then the unknown, returned in
      ``SolveResult.held_flow`` (used by the fire-flow scan, ``calib.fireflow``).
    - ``label``: free text carried to the result (a test id, a scenario name).
    """

    demand_factor: float = 1.0
    extra_demand: dict = field(default_factory=dict)
    source_head: dict = field(default_factory=dict)
    label: str = ""
    held_head: dict = field(default_factory=dict)


@dataclass
class ResolvedSnapshot:
    """A snapshot checked against one network: demand per junction and head per source [SI]."""

    demand: np.ndarray  # (n_junctions,) [m3/s]
    source_head: np.ndarray  # (n_sources,) [m]
    snapshot: Snapshot
    held: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))  # junction numbers
    held_head: np.ndarray = field(default_factory=lambda: np.zeros(0))  # [m]


def resolve(snapshot: Snapshot | None, network) -> ResolvedSnapshot:
    """Check ``snapshot`` against ``network`` and return demands and source heads as arrays.

    Raises ``InputError`` listing every problem: a name that is not a junction (for extra demand)
    or not a source (for a head), or a value that is not a finite number.
    """
    snapshot = snapshot if snapshot is not None else Snapshot()
    problems: list[Problem] = []
    factor = snapshot.demand_factor
    try:
        factor = float(factor)
        if not math.isfinite(factor):
            raise ValueError
    except (TypeError, ValueError):
        problems.append(Problem(f"demand factor {snapshot.demand_factor!r} is not a finite number",
                                field="demand_factor", expected="a number such as 1.0"))
        factor = 1.0
    nj = network.n_junctions
    demand = network.demand * factor
    extra = np.zeros(nj)
    for i, v in _named_values(snapshot.extra_demand, network, problems, sources=False):
        extra[i] += v
    heads = network.source_head.copy()
    for i, v in _named_values(snapshot.source_head, network, problems, sources=True):
        heads[i - nj] = v
    held = list(_named_values(getattr(snapshot, "held_head", {}) or {}, network, problems,
                              sources=False, name="held_head"))
    if problems:
        raise InputError(problems)
    return ResolvedSnapshot(demand=demand + extra, source_head=heads, snapshot=snapshot,
                            held=np.array([i for i, _ in held], dtype=np.int64),
                            held_head=np.array([v for _, v in held], dtype=float))


# What each named mapping of a snapshot holds: (field, wrong kind of node, expected node, value, hint).
_FIELDS = {
    False: ("extra_demand", "is a fixed-grade source, not a junction", "the id of a junction",
            "extra demand {!r} is not a finite number [m3/s]", "a flow in m3/s, e.g. 0.063 for 1000 gpm"),
    True: ("source_head", "is a junction, not a fixed-grade source", "the id of a reservoir or tank",
           "source head {!r} is not a finite number [m]", "a hydraulic grade in m"),
}


def _named_values(mapping: dict, network, problems: list[Problem], sources: bool,
                  name: str | None = None):
    """Yield (node number, float) for each entry of ``mapping`` that names the right kind of node
    (a source when ``sources``, else a junction) and holds a finite number; append a Problem for the
    others."""
    field_name, wrong_kind, expected_node, bad_value, expected_value = _FIELDS[sources]
    name = name or field_name
    if name == "held_head":
        bad_value, expected_value = "held grade {!r} is not a finite number [m]", "a hydraulic grade in m"
    index, nj = network.node_index, network.n_junctions
    for node, value in mapping.items():
        i = index.get(str(node))
        if i is None or (i >= nj) != sources:
            what = wrong_kind if i is not None else "is not in the network"
            problems.append(Problem(f"node '{node}' {what}", id=str(node), field=name,
                                    expected=expected_node))
            continue
        try:
            v = float(value)
            if not math.isfinite(v):
                raise ValueError
        except (TypeError, ValueError):
            problems.append(Problem(bad_value.format(value), id=str(node), field=name,
                                    expected=expected_value))
            continue
        yield i, v
