"""Plausibility of the numbers in a network's tables, against the ranges of ``calib.limits``.

Appends one ``Problem`` per value outside its range (file, row, id, field, the range in both unit
systems), so that a typo or a wrong unit (a diameter of 1e9, an elevation of 1e300) is refused by
name before it reaches the solver, where it would make the matrix singular or overflow.

What ``calib.network.validate`` checks already is left to it (a length or diameter of zero or less,
C outside its range, a negative minor loss or roughness height); this module is not the checks
between tables.
"""

from __future__ import annotations

import numpy as np

from calib import limits
from calib.errors import Problem
from calib.network.tables import NetworkTables, ParsedTable

#: Per table: (column, limit, only values above zero are checked here - validate says the rest).
CHECKS = {
    "junctions": (("elevation", limits.ELEVATION, False), ("demand", limits.DEMAND, False),
                  ("x", limits.MAP_COORDINATE, False), ("y", limits.MAP_COORDINATE, False)),
    "sources": (("head", limits.HEAD, False), ("elevation", limits.ELEVATION, False),
                ("x", limits.MAP_COORDINATE, False), ("y", limits.MAP_COORDINATE, False),
                ("floor", limits.ELEVATION, False), ("level_max", limits.TANK_LEVEL, True)),
    "pipes": (("length", limits.PIPE_LENGTH, True), ("diameter", limits.PIPE_DIAMETER, True),
              ("minor_loss", limits.MINOR_LOSS, True)),
    "pumps": (*((f"{q}_{i}", limits.PUMP_HEAD if q == "head" else limits.PUMP_FLOW, False)
                for i in (1, 2, 3) for q in ("head", "flow")),
              ("shutoff_head", limits.PUMP_HEAD, False), ("design_head", limits.PUMP_HEAD, False),
              ("design_flow", limits.PUMP_FLOW, False), ("speed", limits.PUMP_SPEED, False)),
}


def check_table(table: ParsedTable, checks, problems: list[Problem]) -> None:
    """One problem per finite value of ``table`` outside its limit (NaN: a parsing problem already)."""
    ids = table.get("id", "")
    for name, limit, positive_only in checks:
        if name not in table.values:
            continue
        values = np.asarray(table.values[name], dtype=float)
        finite = np.isfinite(values)
        inside = (values >= limit.low) & (values <= limit.high)
        if limit.low_open:
            inside &= values > limit.low
        bad = finite & ~inside
        if positive_only:
            bad &= values > 0
        for i in np.flatnonzero(bad):
            problems.append(Problem(f"{limit.name} {limit.show(values[i])} "
                                    f"{limit.why_refused(values[i])}", file=table.file,
                                    row=int(table.rows[i]), id=str(ids[i]) or None, field=name,
                                    expected=limit.expected()))


def check_ranges(tables: NetworkTables, problems: list[Problem]) -> None:
    """Check every table of ``tables`` (see ``CHECKS``), appending to ``problems``."""
    for name, checks in CHECKS.items():
        table = getattr(tables, name, None)
        if table is not None:
            check_table(table, checks, problems)
