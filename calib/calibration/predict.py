"""What a flow test should read: static and residual pressure at the gauges, from the model.

The field app calls ``predict_test`` on site to compare the readings just taken with the model before
the crew leaves (a reading far off the prediction is worth a second look at the gauge, its height, or a
closed valve). Two solves: normal demand, and normal demand plus the test's flows.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from calib.errors import InputError, Problem


@dataclass
class PredictedReading:
    """Model pressures at one gauge's node [Pa gauge]."""

    node: str
    static: float
    residual: float
    #: the pressure zone of the node while the hydrant flows (the source or active valve feeding it)
    zone: str = ""
    #: valves whose state differs between the two snapshots, in words ("" when none)
    valve_note: str = ""

    @property
    def drop(self) -> float:
        """Static minus residual [Pa]."""
        return self.static - self.residual


def _node_id(network, node, field: str, problems) -> str | None:
    if isinstance(node, (int, np.integer)) and not isinstance(node, bool):
        if 0 <= int(node) < network.n_junctions:
            return str(network.node_ids[int(node)])
        problems.append(Problem(f"node number {node} is not a junction", field=field,
                                expected=f"0 to {network.n_junctions - 1} or a junction id"))
        return None
    key = str(node)
    i = network.node_index.get(key)
    if i is None or i >= network.n_junctions:
        what = "is a source, not a junction" if i is not None else "is not in the network"
        problems.append(Problem(f"node '{key}' {what}", id=key, field=field,
                                expected="the id of a junction where a hydrant or gauge stands"))
        return None
    return key


def predict_test(network, flows: dict, gauges, roughness=None, source_head=None, solver=None,
                 demand_factor: float = 1.0) -> list[PredictedReading]:
    """Static and residual pressure [Pa gauge] at each gauge node for a test drawing ``flows``.

    ``flows``: {junction id (or number): flow [m3/s]}; ``gauges``: junction ids (or numbers);
    ``roughness``: per-pipe C (default the network's, e.g. a calibrated one); ``source_head``:
    {source id: grade [m]} read at the time of the test. Raises ``InputError`` naming bad ids.
    """
    from calib.hydraulics import NetworkSolver, Snapshot
    problems: list[Problem] = []
    extra: dict[str, float] = {}
    for node, q in dict(flows).items():
        key = _node_id(network, node, "flows", problems)
        try:
            q = float(q)
        except (TypeError, ValueError):
            problems.append(Problem(f"flow {q!r} is not a number [m3/s]", id=str(node), field="flows"))
            continue
        if not np.isfinite(q) or q < 0:
            problems.append(Problem(f"flow {q!r} must be zero or more [m3/s]", id=str(node),
                                    field="flows", expected="e.g. 0.063 for 1000 gpm"))
            continue
        if key is not None:
            extra[key] = extra.get(key, 0.0) + q
    if isinstance(gauges, (str, int, np.integer)):
        gauges = [gauges]  # one gauge given bare: not its characters one by one
    keys = [_node_id(network, g, "gauges", problems) for g in gauges]
    if problems:
        raise InputError(problems)
    heads = {str(k): float(v) for k, v in (source_head or {}).items()}
    solver = solver or NetworkSolver(network, headloss="hazen-williams")
    static, residual = solver.solve_many(
        [Snapshot(demand_factor=demand_factor, source_head=heads, label="static"),
         Snapshot(demand_factor=demand_factor, extra_demand=extra, source_head=heads,
                  label="residual")], roughness=roughness)
    index = network.node_index
    from calib.calibration.zones import describe_changes, state_changes
    note = " ".join(describe_changes("on site", state_changes(network, static, residual)))
    zone = residual.zone if residual.zone is not None else np.full(network.n_junctions, "")
    return [PredictedReading(node=k, static=float(static.pressure[index[k]]),
                             residual=float(residual.pressure[index[k]]),
                             zone=str(zone[index[k]]), valve_note=note) for k in keys]
