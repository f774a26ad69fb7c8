"""A tank's water level and its hydraulic grade: grade = floor elevation + level.

Operators report a tank's level (the water depth above its floor), not its grade. ``sources.csv``
may give a source's ``floor`` (the grade at level 0) and ``level_max`` (the greatest depth); with
them a level becomes a grade, and a grade or level the tank cannot hold is refused with the tank's
range in the message. Plain SI floats [m] in and out.
"""

from __future__ import annotations

import math

from calib.errors import InputError, Problem
from calib.units import DISPLAY, from_si


def _index(network, source: str) -> int:
    ids = [str(s) for s in network.source_ids]
    if source not in ids:
        raise InputError(Problem(f"'{source}' is not a source of the network", field="source",
                                 expected="one of " + ", ".join(ids)))
    return ids.index(source)


def tank_range(network, source: str) -> tuple[float, float]:
    """(floor, top) grades [m] of ``source``; nan where the network does not say."""
    s = _index(network, source)
    floor = float(network.source_floor[s])
    depth = float(network.source_level_max[s])
    return floor, floor + depth if math.isfinite(depth) else math.nan


def _ft(value: float, system: str) -> str:
    unit = DISPLAY[system]["head"]
    return f"{float(from_si(value, 'head', unit)):,.1f} {unit}"


def describe_range(network, source: str, system: str = "us") -> str:
    """The tank's range in words, e.g. 'level 0 to 40.0 ft (grade 954.0 to 994.0 ft)'."""
    floor, top = tank_range(network, source)
    if not math.isfinite(floor):
        return "the network gives no floor for this source"
    if not math.isfinite(top):
        return f"grade above the floor at {_ft(floor, system)}"
    bare = _ft(floor, system).rsplit(" ", 1)[0]
    return f"level 0 to {_ft(top - floor, system)} (grade {bare} to {_ft(top, system)})"


def grade_from_level(network, source: str, level: float, system: str = "us") -> float:
    """Grade [m] of ``source`` at water ``level`` [m above its floor]; ``InputError`` when the
    network gives no floor or the tank cannot hold that level."""
    floor, top = tank_range(network, source)
    if not math.isfinite(floor):
        raise InputError(Problem(f"the network gives no floor for '{source}', so a level cannot "
                                 "become a grade", field="level",
                                 expected="the grade instead, or a 'floor' column in sources.csv"))
    grade = floor + level
    if level < 0 or (math.isfinite(top) and grade > top + 1e-9):
        raise InputError(Problem(f"level {_ft(level, system)} does not fit tank '{source}'",
                                 field="level", expected=describe_range(network, source, system)))
    return grade


def check_grade(network, source: str, grade: float, system: str = "us") -> float:
    """``grade`` [m] when the tank can hold it (or the network gives no range), else ``InputError``."""
    floor, top = tank_range(network, source)
    if (math.isfinite(floor) and grade < floor - 1e-9) or (math.isfinite(top) and grade > top + 1e-9):
        raise InputError(Problem(f"grade {_ft(grade, system)} does not fit tank '{source}'",
                                 field="grade", expected=describe_range(network, source, system)))
    return grade
