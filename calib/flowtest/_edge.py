"""Edge conversion for the flow-test functions: values in, SI floats (or float arrays) out.

Every public function of ``calib.flowtest`` takes plain SI numbers, numpy arrays of them, pint
Quantities or strings such as ``"72 psi"``; this module turns them into SI and turns a wrong dimension
or junk text into a ``FlowTestError`` that names the argument and its plausible range.
"""

from __future__ import annotations

import numpy as np

from calib.errors import FlowTestError, Problem
from calib.units import to_si

#: Plausible range shown in error messages, by argument kind.
RANGE = {
    "pressure": "a gauge pressure such as 60 psi or 400 kPa",
    "diameter": "an outlet or pipe diameter such as 2.5 in or 64 mm",
    "flow": "a flow such as 800 gpm or 50 L/s",
    "length": "a length such as 1000 ft or 300 m",
    "elevation": "an elevation such as 120 ft or 35 m",
    "head": "a hydraulic grade such as 250 ft or 75 m",
}


def si(value, kind: str, name: str):
    """``value`` in SI for ``kind``; arrays pass through as float arrays (already SI)."""
    if isinstance(value, np.ndarray):
        return value.astype(float)
    try:
        return to_si(value, kind)
    except (ValueError, TypeError) as exc:
        raise FlowTestError(Problem(str(exc), field=name, expected=RANGE.get(kind, kind))) from exc


def fail(name: str, message: str, expected: str | None = None):
    """Raise a ``FlowTestError`` about argument ``name``."""
    raise FlowTestError(Problem(message, field=name, expected=expected))


def scalar_or_array(x):
    """A float for a 0-d result, the array otherwise (keeps scalar calls scalar)."""
    x = np.asarray(x, dtype=float)
    return float(x) if x.ndim == 0 else x
