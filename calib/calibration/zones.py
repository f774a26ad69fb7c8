"""Flow tests in a network with control valves: which pressure zone each test's nodes are in, and
the valves whose state differs between a test's static and residual snapshots.

A valve that changes state while a hydrant flows (a reducing valve that opens fully because the
grade upstream fell below its setting, one that closes, a flow-limiting valve that starts to limit)
changes how the network answers the test; it is a common reason a test disagrees with the model
(common practice: note the valves' state and settings at the time of the test). Not here: the valve
states themselves (``calib.hydraulics.valves``).
"""

from __future__ import annotations

import numpy as np


def state_changes(network, static, residual) -> list[tuple[str, str, str]]:
    """(valve id, state in ``static``, state in ``residual``) for each valve whose state differs."""
    if len(network.valves) == 0 or static is None or residual is None:
        return []
    a, b = np.asarray(static.valve_state), np.asarray(residual.valve_state)
    return [(str(network.valves.ids[k]), str(a[k]), str(b[k])) for k in np.flatnonzero(a != b)]


def describe_changes(test_id: str, changes) -> list[str]:
    """One sentence per valve that changed state in a test."""
    return [f"Test {test_id}: valve {vid} is {before} in the static snapshot and {after} while the "
            "hydrant flows; the test straddles a change of the valve's state, a common reason a "
            "test disagrees with the model (check the valve's setting and state in the field)."
            for vid, before, after in changes]


def test_findings(network, tests, problem, results) -> list[str]:
    """Findings for a fit: valves that changed state between a test's two snapshots, and tests
    whose gauges or flowing hydrants lie in more than one pressure zone (the test's flow crosses a
    valve). ``problem`` is the ``CalibrationProblem`` whose ``results`` these are."""
    if len(network.valves) == 0:
        return []
    snap: dict[int, dict[str, int]] = {}
    for i, (t, kind) in enumerate(zip(tests.test, tests.kind)):
        snap.setdefault(int(t), {})[str(kind)] = int(problem.reading_snapshot[i])
    out = []
    for t in sorted(snap):
        s = snap[t]
        if "static" in s and "residual" in s:
            out += describe_changes(tests.test_ids[t], state_changes(network, results[s["static"]],
                                                                     results[s["residual"]]))
        res = results[s.get("residual", s.get("static"))]
        nodes = {int(n) for n, tt in zip(tests.node, tests.test) if int(tt) == t}
        nodes |= {int(n) for n in tests.flows[t]}
        zones = sorted({str(res.zone[n]) for n in nodes if n < network.n_junctions})
        if len(zones) > 1:
            out.append(f"Test {tests.test_ids[t]}: its hydrants and gauges lie in {len(zones)} "
                       f"pressure zones ({', '.join(zones)}); the test's flow crosses a valve.")
    return out
